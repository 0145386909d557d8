/**
 * The alert life cycle on a real PostgreSQL: on-delay, deadband, off-delay, grade in place,
 * returned to normal unacknowledged, reactivation, one open alert per condition, and that every
 * change is one history row written in the caller's transaction.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { addUnit, apply, at, finding, obs, settings, ringWithSpread, sequence } from '../helpers/alerts.ts';
import { acknowledgeAlert } from '../../services/db/alert-actions.ts';
import { alertHistory, getAlert, listActiveAlerts, listAlerts } from '../../services/db/alert-reads.ts';
import { createWebhook, outboxRows } from '../../services/db/webhooks.ts';
import { withTransaction } from '../../services/db/pool.ts';
import { applyAlertObservations, conditionKey, deadbandThresholds, loadAlertSettings } from '../../services/worker/alerts.ts';
import { evaluateFindings } from '../../services/core/evaluate-findings.ts';
import { defaultThresholds } from '../../services/core/findings.ts';
import { loadConfig, ConfigError } from '../../services/db/config.ts';

let db: TestDatabase;
let n = 0;
/** A fresh unit per test, so tests do not see each other's alerts. */
async function unit(): Promise<string> {
  const id = `lc-${n++}`;
  await addUnit(db.pool, id);
  return id;
}
const all = async (unitId: string) => (await listAlerts(db.pool, { scope: null, unitId, state: 'all', limit: 100, now: new Date() })).alerts;
async function count(sql: string, params: unknown[]): Promise<number> {
  const { rows } = await db.pool.query(sql, params);
  return Number(rows[0].n);
}

beforeAll(async () => {
  db = await createTestDatabase();
});
afterAll(async () => db.drop());

describe('on-delay', () => {
  it('a one-ring blip raises nothing, and leaves no pending condition behind', async () => {
    const u = await unit();
    const s = settings({ on: 30 });
    const cold = finding('chamber_cold', 'alarm');
    const seq = Array.from({ length: 120 }, (_, i) => obs(i, i === 50 ? [cold] : []));
    expect(await apply(db.pool, u, seq, s)).toEqual([]);
    expect(await all(u)).toEqual([]);
    expect(await count('SELECT count(*) AS n FROM alert_pending WHERE unit_id = $1', [u])).toBe(0);
  });

  it('a condition present for less than the on-delay raises nothing; for the whole on-delay, one alert at the instant it ran out', async () => {
    const u = await unit();
    const s = settings({ on: 30 });
    const cold = finding('chamber_cold', 'warning');
    // 0..29 present (29 s < 30 s), then gone, then 40..80 present.
    const seq = Array.from({ length: 100 }, (_, i) => obs(i, i < 30 || (i >= 40 && i <= 80) ? [cold] : []));
    const changes = await apply(db.pool, u, seq, s);
    expect(changes.map((c) => [c.action, c.at.toISOString()])).toEqual([['raised', at(70).toISOString()]]);
    const [a] = await all(u);
    expect(a).toMatchObject({ kind: 'chamber_cold', chamber: 4, grade: 'warning', active: true, acknowledged: false, raisedAt: at(70).toISOString() });
  });

  it('on-delay is kept between calls: ring time, not the number of calls, decides', async () => {
    const u = await unit();
    const s = settings({ on: 30 });
    const cold = finding('chamber_cold', 'warning');
    for (let i = 0; i < 30; i++) expect(await apply(db.pool, u, [obs(i, [cold])], s)).toEqual([]);
    const changes = await apply(db.pool, u, [obs(30, [cold])], s);
    expect(changes.map((c) => c.action)).toEqual(['raised']);
  });

  it('a backfill in one call and the same rings one by one give the same alerts and history', async () => {
    const a = await unit();
    const b = await unit();
    const s = settings({ on: 20, off: 40, grade: 5 });
    const rnd = sequence(7);
    const grades = ['warning', 'alarm', 'critical'] as const;
    const seq = Array.from({ length: 400 }, (_, i) => {
      const on = Math.sin(i / 25) > -0.2;
      const g = grades[Math.floor(rnd() * 3)];
      return obs(i, on ? [finding('chamber_hot', g, { chamber: 2 })] : []);
    });
    await apply(db.pool, a, seq, s);
    for (const o of seq) await apply(db.pool, b, [o], s);
    const strip = (xs: Awaited<ReturnType<typeof all>>) =>
      xs.map((x) => ({ grade: x.grade, active: x.active, raisedAt: x.raisedAt, clearedAt: x.clearedAt, history: x.history!.map((h) => [h.action, h.at, h.grade, h.fromGrade]) }));
    const ra = await all(a);
    expect(ra.length).toBeGreaterThan(0);
    expect(strip(await all(b))).toEqual(strip(ra));
  });

  it('observations at or before the last applied ring time change nothing (late rings, re-runs)', async () => {
    const u = await unit();
    const s = settings({ on: 0, off: 0 });
    const cold = finding('chamber_cold', 'warning');
    await apply(db.pool, u, [obs(0, [cold]), obs(1, [cold])], s);
    expect(await apply(db.pool, u, [obs(0, [cold]), obs(1, [])], s)).toEqual([]);
    const [a] = await all(u);
    expect(a.active).toBe(true);
    expect(a.history).toHaveLength(1);
  });
});

describe('deadband and off-delay', () => {
  // A spread hovering at the default limit (45 °C, no baseline): 45 + 1.5·sin + noise of ±1 °C,
  // for 30 minutes at one ring a second, then clearly healthy (35 °C) for 5 minutes.
  const LIMIT = defaultThresholds.spreadDefaultLimitDegC;
  function hovering(): number[] {
    const rnd = sequence(42);
    const v: number[] = [];
    for (let i = 0; i < 1800; i++) v.push(LIMIT + 1.5 * Math.sin(i / 7) + (rnd() * 2 - 1));
    for (let i = 0; i < 300; i++) v.push(35 + (rnd() * 2 - 1));
    return v;
  }
  function observe(values: number[], deadbandDegC: number) {
    const hold = deadbandThresholds(defaultThresholds, { deadbandDegC, deadbandZ: 0.5, deadbandRatio: 0.1 });
    return values.map((sp, i) => ({
      ts: at(i),
      raise: evaluateFindings({ analysis: ringWithSpread(sp), steady: false }),
      hold: evaluateFindings({ analysis: ringWithSpread(sp), steady: false, thresholds: hold }),
    }));
  }

  it('without on-delay, off-delay or deadband the hovering signal raises once per upward crossing of the limit', async () => {
    const u = await unit();
    const values = hovering();
    let crossings = 0;
    for (let i = 0; i < values.length; i++) if (values[i] > LIMIT && (i === 0 || values[i - 1] <= LIMIT)) crossings++;
    expect(crossings).toBeGreaterThan(50);
    const changes = await apply(db.pool, u, observe(values, 0), settings({ on: 0, off: 0, deadband: 0 }));
    const raises = changes.filter((c) => c.action === 'raised' || c.action === 'reactivated');
    expect(raises).toHaveLength(crossings);
  });

  it('with a 3 °C deadband, 10 s on-delay and 60 s off-delay the same signal raises exactly once and returns to normal exactly once', async () => {
    const u = await unit();
    const values = hovering();
    const changes = await apply(db.pool, u, observe(values, 3), settings({ on: 10, off: 60, deadband: 3, grade: 10 }));
    expect(changes.filter((c) => c.action === 'raised' || c.action === 'reactivated')).toHaveLength(1);
    const rtn = changes.filter((c) => c.action === 'returned_to_normal');
    expect(rtn).toHaveLength(1);
    // Healthy from ring 1800: the off-delay runs out 60 s after the first ring without the condition.
    expect(rtn[0].at.getTime()).toBe(at(1860).getTime());
    const [a] = await all(u);
    expect(a).toMatchObject({ kind: 'spread_high', active: false, acknowledged: false, clearedAt: at(1860).toISOString() });
  });

  it('deadbandThresholds lowers every temperature level, and the grades with it', () => {
    const t = deadbandThresholds(defaultThresholds, { deadbandDegC: 3, deadbandZ: 0.5, deadbandRatio: 0.1 });
    expect(t.spreadDefaultLimitDegC).toBe(42);
    expect(t.spreadLimitFloorDegC).toBe(27);
    expect(t.spreadLimitCeilingDegC).toBe(77);
    expect(t.chamberColdWarningDegC).toBe(9);
    expect(t.chamberNoBaselineWarningDegC).toBe(47);
    expect(t.chamberColdAlarmDegC).toBe(37);
    expect(t.chamberColdCriticalDegC).toBe(77);
    expect(t.chamberHotAlarmDegC).toBe(32);
    expect(t.spreadJumpWarningDegC).toBe(12);
    expect(t.chamberMinZ).toBe(2.5);
    expect(t.driftWarningDegCPer30Days).toBeCloseTo(4.5, 10);
    expect(t.coverageAlarmFraction).toBeCloseTo(0.55, 10);
    expect(t.outlierRecurringRings).toBe(2);
    // A spread 1 °C over the limit is found at the raise level and still at the hold level when it is 2 °C under.
    const hold = evaluateFindings({ analysis: ringWithSpread(43), steady: false, thresholds: t });
    expect(evaluateFindings({ analysis: ringWithSpread(43), steady: false })).toEqual([]);
    expect(hold.map((f) => f.kind)).toEqual(['spread_high']);
    // Alarm grade (15 °C over) is held down to 12 °C over the original limit.
    expect(evaluateFindings({ analysis: ringWithSpread(45 + 12.5), steady: false, thresholds: t })[0].grade).toBe('alarm');
  });

  it('a condition that comes back within the off-delay keeps its alert active, with no new history', async () => {
    const u = await unit();
    const f = finding('thermocouple_fault', 'warning', { thermocouple: 5 });
    const seq = Array.from({ length: 300 }, (_, i) => obs(i, i % 50 < 40 ? [f] : []));
    const changes = await apply(db.pool, u, seq, settings({ on: 0, off: 30 }));
    expect(changes.map((c) => c.action)).toEqual(['raised']);
  });
});

describe('grade in place', () => {
  it('escalates and de-escalates in place after the grade delay, one history row each; a one-ring wobble changes nothing', async () => {
    const u = await unit();
    const s = settings({ on: 5, off: 60, grade: 10 });
    const g = (grade: 'warning' | 'alarm' | 'critical') => [finding('chamber_cold', grade)];
    const seq = [
      ...Array.from({ length: 20 }, (_, i) => obs(i, g('warning'))), // raised at 5 as warning
      obs(20, g('critical')), // one-ring wobble: nothing
      ...Array.from({ length: 20 }, (_, i) => obs(21 + i, g('warning'))),
      ...Array.from({ length: 30 }, (_, i) => obs(41 + i, g('alarm'))), // escalated at 51
      ...Array.from({ length: 30 }, (_, i) => obs(71 + i, g('warning'))), // de-escalated at 81
    ];
    const changes = await apply(db.pool, u, seq, s);
    expect(changes.map((c) => [c.action, c.fromGrade, c.grade, (c.at.getTime() - at(0).getTime()) / 1000])).toEqual([
      ['raised', null, 'warning', 5],
      ['escalated', 'warning', 'alarm', 51],
      ['deescalated', 'alarm', 'warning', 81],
    ]);
    const alerts = await all(u);
    expect(alerts).toHaveLength(1);
    expect(alerts[0].history!.map((h) => h.action)).toEqual(['raised', 'escalated', 'deescalated']);
  });

  it('the grade raised is the lowest held through the on-delay', async () => {
    const u = await unit();
    const seq = [obs(0, [finding('chamber_cold', 'alarm')]), obs(1, [finding('chamber_cold', 'warning')]), obs(2, [finding('chamber_cold', 'critical')])];
    const changes = await apply(db.pool, u, seq, settings({ on: 2 }));
    expect(changes.map((c) => [c.action, c.grade])).toEqual([['raised', 'warning']]);
  });

  it('de-escalation waits for the hold-level grade: the deadband applies between grades', async () => {
    const u = await unit();
    const s = settings({ on: 0, off: 60, grade: 0 });
    const raiseAlarm = [finding('chamber_cold', 'alarm')];
    const changes = await apply(db.pool, u, [
      obs(0, raiseAlarm),
      // raise level says warning, hold level still alarm: stays alarm
      obs(1, [finding('chamber_cold', 'warning')], [finding('chamber_cold', 'alarm')]),
      obs(2, [finding('chamber_cold', 'warning')], [finding('chamber_cold', 'alarm')]),
      // hold level says warning: down
      obs(3, [finding('chamber_cold', 'warning')], [finding('chamber_cold', 'warning')]),
    ], s);
    expect(changes.map((c) => [c.action, c.grade])).toEqual([['raised', 'alarm'], ['deescalated', 'warning']]);
  });

  it('escalation makes an acknowledged alert unacknowledged again; de-escalation keeps the acknowledgement', async () => {
    const u = await unit();
    const s = settings({ on: 0, off: 60, grade: 0 });
    const [raised] = await apply(db.pool, u, [obs(0, [finding('chamber_hot', 'warning')])], s);
    await acknowledgeAlert(db.pool, raised.alertId, { by: 'shift operator 1', now: new Date() });
    await apply(db.pool, u, [obs(1, [finding('chamber_hot', 'alarm')])], s);
    let a = (await getAlert(db.pool, raised.alertId))!;
    expect(a).toMatchObject({ grade: 'alarm', acknowledged: false });
    expect(a.history!.find((h) => h.action === 'escalated')!.details).toMatchObject({ acknowledgementCleared: true });
    await acknowledgeAlert(db.pool, raised.alertId, { by: 'shift operator 1', now: new Date() });
    await apply(db.pool, u, [obs(2, [finding('chamber_hot', 'warning')])], s);
    a = (await getAlert(db.pool, raised.alertId))!;
    expect(a).toMatchObject({ grade: 'warning', acknowledged: true });
  });
});

describe('acknowledged and returned to normal', () => {
  it('returned to normal unacknowledged stays open; a recurrence reactivates the same alert; acknowledging after return closes it', async () => {
    const u = await unit();
    const s = settings({ on: 2, off: 5 });
    const f = [finding('thermocouple_fault', 'warning', { thermocouple: 3 })];
    let changes = await apply(db.pool, u, [obs(0, f), obs(1, f), obs(2, f), obs(3), obs(8)], s);
    expect(changes.map((c) => c.action)).toEqual(['raised', 'returned_to_normal']);
    const id = changes[0].alertId;
    expect((await getAlert(db.pool, id))!).toMatchObject({ active: false, acknowledged: false, closedAt: null, clearedAt: at(8).toISOString() });
    expect((await listAlerts(db.pool, { scope: null, unitId: u, state: 'open', limit: 10, now: new Date() })).alerts).toHaveLength(1);

    changes = await apply(db.pool, u, [obs(20, f), obs(21, f), obs(22, f)], s);
    expect(changes.map((c) => [c.action, c.alertId])).toEqual([['reactivated', id]]);
    expect(await all(u)).toHaveLength(1);

    changes = await apply(db.pool, u, [obs(23), obs(30)], s);
    expect(changes.map((c) => c.action)).toEqual(['returned_to_normal']);
    const acked = await acknowledgeAlert(db.pool, id, { by: 'shift operator 2', comment: 'thermocouple 3 wiring checked', now: new Date() });
    expect(acked!.alert).toMatchObject({ acknowledged: true, acknowledgedBy: 'shift operator 2', active: false });
    expect(acked!.alert.closedAt).not.toBeNull();

    // Closed: the next occurrence is a new alert.
    changes = await apply(db.pool, u, [obs(40, f), obs(41, f), obs(42, f)], s);
    expect(changes.map((c) => c.action)).toEqual(['raised']);
    expect(changes[0].alertId).not.toBe(id);
    expect(await all(u)).toHaveLength(2);
  });

  it('an acknowledged active alert closes when it returns to normal', async () => {
    const u = await unit();
    const s = settings({ on: 0, off: 0 });
    const [r] = await apply(db.pool, u, [obs(0, [finding('coverage_degraded', 'alarm')])], s);
    await acknowledgeAlert(db.pool, r.alertId, { by: 'shift operator 1', now: new Date() });
    const changes = await apply(db.pool, u, [obs(1)], s);
    expect(changes.map((c) => c.action)).toEqual(['returned_to_normal']);
    const a = (await getAlert(db.pool, r.alertId))!;
    expect(a.closedAt).toBe(at(1).toISOString());
    expect(a.history!.map((h) => h.action)).toEqual(['raised', 'acknowledged', 'returned_to_normal']);
  });

  it('acknowledging twice writes one history row', async () => {
    const u = await unit();
    const [r] = await apply(db.pool, u, [obs(0, [finding('chamber_cold', 'warning')])], settings({ on: 0 }));
    const first = await acknowledgeAlert(db.pool, r.alertId, { by: 'shift operator 1', now: new Date() });
    const second = await acknowledgeAlert(db.pool, r.alertId, { by: 'shift operator 2', now: new Date() });
    expect(first!.change).not.toBeNull();
    expect(second!.change).toBeNull();
    expect(second!.alert.acknowledgedBy).toBe('shift operator 1');
    expect((await alertHistory(db.pool, r.alertId)).filter((h) => h.action === 'acknowledged')).toHaveLength(1);
  });
});

describe('one open alert per condition', () => {
  it('the same condition in many observations and calls has one open alert; different chambers have their own', async () => {
    const u = await unit();
    const s = settings({ on: 0, off: 600 });
    const f4 = finding('chamber_cold', 'warning', { chamber: 4 });
    const f5 = finding('chamber_cold', 'warning', { chamber: 5 });
    await apply(db.pool, u, Array.from({ length: 10 }, (_, i) => obs(i, [f4, f4])), s);
    await apply(db.pool, u, Array.from({ length: 10 }, (_, i) => obs(10 + i, [f4, f5])), s);
    const alerts = await all(u);
    expect(alerts.map((a) => a.chamber).sort()).toEqual([4, 5]);
  });

  it('the database refuses a second open alert for a condition (partial unique index)', async () => {
    const u = await unit();
    await apply(db.pool, u, [obs(0, [finding('chamber_cold', 'warning')])], settings({ on: 0 }));
    await expect(
      db.pool.query(
        `INSERT INTO alerts (unit_id, kind, condition_key, grade, chamber, active, raised_at, last_changed_at, message, advice)
         VALUES ($1, 'chamber_cold', $2, 'warning', 4, true, now(), now(), 'm', 'a')`,
        [u, conditionKey('chamber_cold', 4, null)],
      ),
    ).rejects.toMatchObject({ code: '23505' });
  });

  it('a unit-wide condition keeps one alert while its attributed chamber moves', async () => {
    const u = await unit();
    const seq = Array.from({ length: 20 }, (_, i) => obs(i, [finding('spread_high', 'warning', { chamber: i % 2 ? 4 : 5 })]));
    await apply(db.pool, u, seq, settings({ on: 0 }));
    const alerts = await all(u);
    expect(alerts).toHaveLength(1);
    expect(alerts[0].chamber).toBe(4);
  });
});

describe('transactions', () => {
  it('every change has exactly one history row and its outbox rows, and a rolled-back caller leaves nothing', async () => {
    const u = await unit();
    const hook = await createWebhook(db.pool, { url: 'http://127.0.0.1:9/x', minGrade: 'notice', secret: 'a-secret-of-16-chars', unitIds: [u], createdBy: 'test' });
    const s = settings({ on: 0, off: 0, grade: 0 });
    const seq = [obs(0, [finding('chamber_cold', 'warning')]), obs(1, [finding('chamber_cold', 'alarm')]), obs(2)];
    await expect(
      withTransaction(db.pool, async (c) => {
        const changes = await applyAlertObservations(c, u, seq, s);
        expect(changes).toHaveLength(3);
        throw new Error('caller fails after applying');
      }),
    ).rejects.toThrow('caller fails');
    expect(await count('SELECT count(*) AS n FROM alerts WHERE unit_id = $1', [u])).toBe(0);
    expect(await count('SELECT count(*) AS n FROM alert_history WHERE unit_id = $1', [u])).toBe(0);
    expect(await count('SELECT count(*) AS n FROM webhook_outbox WHERE unit_id = $1', [u])).toBe(0);
    expect(await count('SELECT count(*) AS n FROM alert_unit_state WHERE unit_id = $1 AND evaluated_to IS NOT NULL', [u])).toBe(0);

    const changes = await apply(db.pool, u, seq, s);
    expect(changes.map((c) => c.action)).toEqual(['raised', 'escalated', 'returned_to_normal']);
    const history = await alertHistory(db.pool, changes[0].alertId);
    expect(history.map((h) => h.sequence)).toEqual(changes.map((c) => c.historyId));
    const out = await outboxRows(db.pool, { webhookId: hook.id });
    expect(out.map((o) => o.event)).toEqual(['raised', 'escalated', 'returned_to_normal']);
    const body = JSON.parse(out[1].body);
    expect(body).toMatchObject({ event: 'escalated', grade: 'alarm', fromGrade: 'warning', unitId: u, alert: { id: changes[0].alertId, grade: 'alarm' } });
    expect(body.caution).toMatch(/advises; it does not protect/);
  });

  it('subscriptions get only the grades they asked for (and hear a grade go down from one they got)', async () => {
    const u = await unit();
    const hook = await createWebhook(db.pool, { url: 'http://127.0.0.1:9/y', minGrade: 'alarm', secret: 'a-secret-of-16-chars', unitIds: [u], createdBy: 'test' });
    const s = settings({ on: 0, off: 0, grade: 0 });
    await apply(db.pool, u, [obs(0, [finding('chamber_cold', 'warning')]), obs(1, [finding('chamber_cold', 'alarm')]), obs(2, [finding('chamber_cold', 'warning')]), obs(3)], s);
    expect((await outboxRows(db.pool, { webhookId: hook.id })).map((o) => o.event)).toEqual(['escalated', 'deescalated']);
  });
});

describe('status support and settings', () => {
  it('listActiveAlerts gives the active alerts of one unit, most severe first', async () => {
    const u = await unit();
    await apply(db.pool, u, [obs(0, [finding('chamber_cold', 'warning', { chamber: 1 }), finding('chamber_hot', 'critical', { chamber: 6 })])], settings({ on: 0 }));
    const active = await listActiveAlerts(db.pool, u);
    expect(active.map((a) => [a.kind, a.grade])).toEqual([['chamber_hot', 'critical'], ['chamber_cold', 'warning']]);
  });

  it('loadAlertSettings: defaults, per-kind defaults and per-kind variables', () => {
    const d = loadAlertSettings(loadConfig({}));
    expect(d.onDelayS.chamber_cold).toBe(30);
    expect(d.offDelayS.chamber_cold).toBe(120);
    expect(d.onDelayS.spread_jump).toBe(0);
    expect(d.deadbandDegC).toBe(3);
    const c = loadAlertSettings(loadConfig({ CANSIGHT_ALERT_ON_DELAY_S: '5', CANSIGHT_ALERT_OFF_DELAY_S_CHAMBER_DRIFT: '3600', CANSIGHT_ALERT_DEADBAND_C: '2.5' }));
    expect(c.onDelayS.chamber_hot).toBe(5);
    expect(c.offDelayS.chamber_drift).toBe(3600);
    expect(c.offDelayS.chamber_hot).toBe(120);
    expect(c.deadbandDegC).toBe(2.5);
    expect(() => loadConfig({ CANSIGHT_ALERT_ON_DELAY_S: 'soon' })).toThrow(ConfigError);
    expect(() => loadConfig({ CANSIGHT_ALERT_ON_DELAY_S_CHAMBER_COLD: '-1' })).toThrow(/CANSIGHT_ALERT_ON_DELAY_S_CHAMBER_COLD/);
    expect(() => loadConfig({ CANSIGHT_WEBHOOK_MAX_TRIES: '0' })).toThrow(/CANSIGHT_WEBHOOK_MAX_TRIES/);
  });
});
