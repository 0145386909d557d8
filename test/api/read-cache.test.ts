/**
 * The fleet and the unit status answer from what they read before while nothing has been
 * written since; these tests check that whatever is written (through the API or straight into
 * the tables, as the worker does from its own process) shows in the very next read, that a shelf
 * running out shows without any write, and that the one-statement status reads what the
 * repositories read.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { gunzipSync } from 'node:zlib';
import pg from 'pg';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { insertAlerts, insertAnalyses } from '../../services/db/synthetic.ts';
import { analysisProgress } from '../../services/db/progress.ts';
import { latestAnalysis } from '../../services/db/analysis.ts';
import { listActiveAlerts } from '../../services/db/alert-reads.ts';
import { baselineOutlook } from '../../services/db/baselines.ts';
import { createStartsRepository } from '../../services/db/starts.ts';
import { unitStatusState, unitStatusStates } from '../../services/db/status-reads.ts';
import { statusBody } from '../../services/api/routes/status.ts';
import { fleetBodyMaker, fleetRows } from '../../services/api/routes/fleet.ts';
import { coalesced } from '../../services/api/routes/read-common.ts';
import { fleetState, fleetUnitVersions, type FleetRecord, type FleetStarts } from '../../services/db/reads.ts';
import { seedUnit, type Seeded } from './read-fixtures.ts';

let t: TestApp;
let seeded: Seeded;
/** A connection of its own, as another process (the worker) has. */
let other: pg.Client;
const get = (url: string, key = t.keys.viewer) => t.app.inject({ url, headers: bearer(key) });
const post = (url: string, payload: Record<string, unknown>) => t.app.inject({ method: 'POST', url, headers: bearer(t.keys.operator), payload });
const status = async (unitId: string) => {
  const res = await get(`/v1/units/${unitId}/status`);
  expect(res.statusCode).toBe(200);
  return res.json();
};
const fleetRow = async (unitId: string) => (await get('/v1/fleet')).json().units.find((u: { unitId: string }) => u.unitId === unitId);
const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

beforeAll(async () => {
  t = await createTestApp();
  for (const id of ['cache-a', 'cache-b', 'cache-quiet', 'cache-many']) {
    const res = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id) });
    expect(res.statusCode).toBe(201);
  }
  seeded = await seedUnit(t.db.pool, 'cache-a', Date.now());
  await insertAnalyses(t.db.pool, 'cache-b', [
    { tsMs: Date.now() - 3_600_000, loadFraction: 0.7, spreadC: 20, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0), chamberDeviationC: Array(10).fill(0), swirlDeg: 70 },
  ]);
  other = new pg.Client({ connectionString: t.db.url });
  await other.connect();
});
afterAll(async () => {
  await other?.end();
  await t?.close();
});

describe('the status statement', () => {
  it('reads what the analysis, alert and starts repositories read', async () => {
    const starts = createStartsRepository(t.db.pool);
    for (const unitId of ['cache-a', 'cache-b', 'cache-quiet']) {
      const now = Date.now();
      const st = await unitStatusState(t.db.pool, unitId, now);
      expect(st).not.toBeNull();
      const [c] = await starts.counters([unitId]);
      const { unitId: _, ...counters } = c;
      const expected = statusBody(unitId, {
        analysis: await latestAnalysis(t.db.pool, unitId),
        progress: await analysisProgress(t.db.pool, unitId),
        alerts: await listActiveAlerts(t.db.pool, unitId, { now: new Date(now) }),
        starts: counters,
        baseline: await baselineOutlook(t.db.pool, unitId).then((o) => ({ version: o!.version, firstSteadyMs: o!.firstSteadyMs, pendingRequest: o!.pendingRequest, inForceFromMs: o!.inForceFromMs, periods: o!.periods })),
        snapshot: '',
        changesAtMs: null,
      }, t.config.worker);
      expect(JSON.parse(JSON.stringify(statusBody(unitId, st!, t.config.worker)))).toEqual(JSON.parse(JSON.stringify(expected)));
      expect((await status(unitId)).activeAlerts).toEqual(JSON.parse(JSON.stringify(expected.activeAlerts)));
    }
    expect(await unitStatusState(t.db.pool, 'cache-none', Date.now())).toBeNull();
    expect((await get('/v1/units/cache-none/status')).statusCode).toBe(404);
  });

  it('reads many units at once as it reads each alone, each with its own alerts', async () => {
    await insertAlerts(t.db.pool, 'cache-many', [
      { kind: 'spread_jump', grade: 'notice', raisedAtMs: Date.now() - 1000, message: 'spread jump' },
      { kind: 'thermocouple_fault', grade: 'warning', thermocouple: 5, raisedAtMs: Date.now(), message: 'thermocouple 5' },
    ]);
    const ids = ['cache-quiet', 'cache-none', 'cache-many', 'cache-a', 'cache-many'];
    const now = Date.now();
    const many = await unitStatusStates(t.db.pool, ids, now);
    expect([...many.keys()].sort()).toEqual(['cache-a', 'cache-many', 'cache-quiet']);
    for (const id of ['cache-a', 'cache-many', 'cache-quiet']) {
      const one = await unitStatusState(t.db.pool, id, now);
      expect(statusBody(id, many.get(id)!, t.config.worker)).toEqual(statusBody(id, one!, t.config.worker));
    }
    expect(many.get('cache-many')!.alerts.map((a) => [a.unitId, a.grade])).toEqual([['cache-many', 'warning'], ['cache-many', 'notice']]);
    expect(many.get('cache-a')!.alerts.every((a) => a.unitId === 'cache-a')).toBe(true);

    // Requests arriving together are answered from one statement, each with its own unit.
    const replies = await Promise.all(ids.map((id) => get(`/v1/units/${id}/status`)));
    expect(replies.map((r) => r.statusCode)).toEqual([200, 404, 200, 200, 200]);
    for (const [k, r] of replies.entries()) if (r.statusCode === 200) expect(r.json().unitId).toBe(ids[k]);
    expect(replies[2].json()).toEqual(replies[4].json());
  });
});

describe('reads after writes', () => {
  it('an acknowledgement, a shelf and an unshelving show in the next status and fleet read', async () => {
    const [id] = seeded.alertIds;
    const alertOf = (s: { activeAlerts: Array<{ id: string; acknowledged: boolean }> }) => s.activeAlerts.find((a) => a.id === id);
    expect(alertOf(await status('cache-a'))?.acknowledged).toBe(false);
    const before = await fleetRow('cache-a');
    expect(before.unacknowledged).toBe(2);

    expect((await post(`/v1/alerts/${id}/ack`, { by: 'shift operator 1' })).statusCode).toBe(200);
    expect(alertOf(await status('cache-a'))?.acknowledged).toBe(true);
    expect((await fleetRow('cache-a')).unacknowledged).toBe(1);

    const until = new Date(Date.now() + 3_600_000).toISOString();
    expect((await post(`/v1/alerts/${id}/shelve`, { by: 'shift operator 1', until, reason: 'crew on site' })).statusCode).toBe(200);
    expect(alertOf(await status('cache-a'))).toBeUndefined();
    expect(await fleetRow('cache-a')).toMatchObject({ activeAlerts: 1, shelvedAlerts: 1 });

    expect((await post(`/v1/alerts/${id}/unshelve`, { by: 'shift operator 1' })).statusCode).toBe(200);
    expect(alertOf(await status('cache-a'))).toBeDefined();
    expect(await fleetRow('cache-a')).toMatchObject({ activeAlerts: 2, shelvedAlerts: 0 });
  });

  it('a ring analysed and an alert raised by another process show in the next status and fleet read', async () => {
    const s0 = await status('cache-b');
    expect(s0.spread).toBe(20);
    expect(s0.activeAlerts).toEqual([]);
    expect((await fleetRow('cache-b')).spreadC).toBe(20);

    const tsMs = Date.now() - 60_000;
    await insertAnalyses(other, 'cache-b', [
      { tsMs, loadFraction: 0.8, spreadC: 33.5, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0), chamberDeviationC: Array(10).fill(0), swirlDeg: 70 },
    ]);
    const s1 = await status('cache-b');
    expect(s1).toMatchObject({ ts: new Date(tsMs).toISOString(), spread: 33.5 });
    expect(s1.progress.watermarkTs).toBe(new Date(tsMs).toISOString());
    expect(await fleetRow('cache-b')).toMatchObject({ spreadC: 33.5, lastAnalysisTs: new Date(tsMs).toISOString() });

    await insertAlerts(other, 'cache-b', [{ kind: 'spread_high', grade: 'alarm', raisedAtMs: Date.now(), message: 'spread high' }]);
    expect((await status('cache-b')).activeAlerts.map((a: { grade: string }) => a.grade)).toEqual(['alarm']);
    expect(await fleetRow('cache-b')).toMatchObject({ worstGrade: 'alarm', activeAlerts: 1 });
  });

  it('a shelf running out shows with no write in between', async () => {
    const [alertId] = await insertAlerts(t.db.pool, 'cache-quiet', [{ kind: 'spread_high', grade: 'warning', raisedAtMs: Date.now(), message: 'spread high' }]);
    const untilMs = Date.now() + 1500;
    expect((await post(`/v1/alerts/${alertId}/shelve`, { by: 'shift operator 1', until: new Date(untilMs).toISOString(), reason: 'a short look' })).statusCode).toBe(200);
    expect((await status('cache-quiet')).activeAlerts).toEqual([]);
    expect(await fleetRow('cache-quiet')).toMatchObject({ activeAlerts: 0, shelvedAlerts: 1 });
    // Read again as the shelf runs out: the cached answers end with it.
    await sleep(Math.max(0, untilMs - Date.now()) + 50);
    expect((await status('cache-quiet')).activeAlerts.map((a: { id: string }) => a.id)).toEqual([alertId]);
    expect(await fleetRow('cache-quiet')).toMatchObject({ activeAlerts: 1, shelvedAlerts: 0, worstGrade: 'warning' });
  });
});

describe('the fleet board compressed', () => {
  /** The board without what follows the clock (asOf, dataAgeS), to compare two reads. */
  const board = (text: string) => {
    const b = JSON.parse(text) as { units: Array<Record<string, unknown>> };
    return b.units.map(({ dataAgeS: _age, ...row }) => row);
  };
  const read = (acceptEncoding: string) => t.app.inject({ url: '/v1/fleet', headers: { ...bearer(t.keys.viewer), 'accept-encoding': acceptEncoding } });

  it('is gzip to a client that accepts it, the same board as the plain reply, and as fresh', async () => {
    const plain = await read('identity');
    expect(plain.headers['content-encoding']).toBeUndefined();
    expect(plain.headers.vary).toMatch(/accept-encoding/i);
    const zipped = await read('gzip, deflate, br');
    expect(zipped.statusCode).toBe(200);
    expect(zipped.headers['content-encoding']).toBe('gzip');
    expect(zipped.headers.vary).toMatch(/accept-encoding/i);
    const unzipped = gunzipSync(zipped.rawPayload).toString('utf8');
    expect(board(unzipped)).toEqual(board(plain.body));
    expect(Number(zipped.headers['content-length'])).toBe(zipped.rawPayload.length);

    // A write by another process shows in the very next compressed read, within the same second too.
    await insertAlerts(other, 'cache-a', [{ kind: 'coverage_degraded', grade: 'critical', raisedAtMs: Date.now(), message: 'coverage degraded' }]);
    const after = board(gunzipSync((await read('gzip')).rawPayload).toString('utf8'));
    expect(after.find((u) => u.unitId === 'cache-a')).toMatchObject({ worstGrade: 'critical' });
    expect(after[0].unitId).toBe('cache-a');
  });

  it('is plain JSON to a client that refuses gzip or asks for another coding only', async () => {
    for (const header of ['gzip;q=0', 'br', '']) {
      const res = await read(header);
      expect(res.statusCode, header).toBe(200);
      expect(res.headers['content-encoding'], header).toBeUndefined();
      expect(board(res.body).length, header).toBe(4);
    }
  });
});

describe('the fleet body', () => {
  it('is, at every instant, the bytes of the fleet rows serialized whole', () => {
    const t0 = Date.parse('2026-03-01T12:00:00Z');
    const rec = (unitId: string, over: Partial<FleetRecord>): FleetRecord => ({
      unitId, name: `Unit ${unitId}`, site: 'Site', temperatureUnit: 'C', lastRingTs: null, lastAnalysisTs: null, loadFraction: null,
      spreadC: null, spreadLimitC: null, validCount: null, thermocoupleCount: null, worstGrade: null, activeAlerts: 0, unacknowledged: 0, shelvedAlerts: 0, ...over,
    });
    const records = [
      rec('u-live', { lastRingTs: new Date(t0 - 30_000).toISOString(), spreadC: 30, spreadLimitC: 40, validCount: 18, thermocoupleCount: 18 }),
      rec('u-late', { name: 'Quote " and \\ and "dataAgeS":0 and é', lastRingTs: new Date(t0 - 600_000).toISOString(), spreadC: 39, spreadLimitC: 40, worstGrade: 'warning', activeAlerts: 1, unacknowledged: 1 }),
      rec('u-turning-silent', { lastRingTs: new Date(t0 - 895_500).toISOString(), spreadC: 10, spreadLimitC: 40 }),
      rec('u-none', {}),
      rec('u-alarm', { lastRingTs: new Date(t0 - 5_000).toISOString(), worstGrade: 'alarm', activeAlerts: 2, shelvedAlerts: 1, temperatureUnit: 'F' }),
    ];
    const starts = new Map<string, FleetStarts>([['u-live', { firedStarts: 3, failedStarts: 1, trips: 0, firedHours: 12.5, lastStartAt: new Date(t0 - 86_400_000).toISOString(), lastStartOutcome: 'completed' }]]);
    const make = fleetBodyMaker(records, 900, starts);
    for (const at of [t0, t0 + 1000, t0 + 5000, t0 + 9000, t0 + 4000, t0 + 3_600_000]) {
      const whole = JSON.stringify({ asOf: new Date(at).toISOString(), units: fleetRows(records, at, 900, starts) });
      expect(make(at).toString()).toBe(whole);
    }
    expect(fleetBodyMaker([], 900)(t0).toString()).toBe(JSON.stringify({ asOf: new Date(t0).toISOString(), units: [] }));
  });
});

describe('coalesced', () => {
  it('gives each caller a run begun after it called, one run at a time, shared by those who waited', async () => {
    let runs = 0;
    let active = 0;
    let most = 0;
    const gates: Array<() => void> = [];
    const run = coalesced(async () => {
      const n = ++runs;
      active++;
      most = Math.max(most, active);
      await new Promise<void>((r) => gates.push(r));
      active--;
      return n;
    });
    const first = run();
    const second = run();
    const third = run();
    await sleep(5);
    expect(runs).toBe(1);
    gates.shift()!();
    expect(await first).toBe(1);
    await sleep(5);
    expect(runs).toBe(2);
    gates.shift()!();
    expect(await second).toBe(2);
    expect(await third).toBe(2);
    expect(most).toBe(1);
  });
});

describe('the fleet board after writes to a few units', () => {
  const board = (units: Array<Record<string, unknown>>) => units.map(({ dataAgeS: _age, ...row }) => row);

  it('changes the version of the units written to, and no other', async () => {
    const before = await fleetUnitVersions(t.db.pool, null);
    await insertAnalyses(other, 'cache-b', [
      { tsMs: Date.now() - 30_000, loadFraction: 0.75, spreadC: 25, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0), chamberDeviationC: Array(10).fill(0), swirlDeg: 70 },
    ]);
    await insertAlerts(other, 'cache-quiet', [{ kind: 'spread_jump', grade: 'notice', raisedAtMs: Date.now(), message: 'spread jump' }]);
    const after = await fleetUnitVersions(t.db.pool, null);
    expect(after.snapshot).not.toBe(before.snapshot);
    const changed = [...after.versions.keys()].filter((id) => after.versions.get(id) !== before.versions.get(id)).sort();
    expect(changed).toEqual(['cache-b', 'cache-quiet']);
    expect((await fleetUnitVersions(t.db.pool, ['cache-b'])).versions.get('cache-b')).toBe(after.versions.get('cache-b'));
  });

  it('reads as a board read whole from the database, after analysis, alerts, a configuration change and a new unit', async () => {
    await get('/v1/fleet');
    await insertAnalyses(other, 'cache-many', [
      { tsMs: Date.now() - 20_000, loadFraction: 0.9, spreadC: 38, spreadLimitC: 40, validity: [2, ...Array(17).fill(0)], tcDeviationC: Array(18).fill(0), chamberDeviationC: Array(10).fill(0), swirlDeg: 70 },
    ]);
    const [id] = await insertAlerts(other, 'cache-b', [{ kind: 'chamber_cold', grade: 'alarm', chamber: 3, raisedAtMs: Date.now(), message: 'chamber 3 cold' }]);
    expect((await post(`/v1/alerts/${id}/ack`, { by: 'shift operator 1' })).statusCode).toBe(200);
    expect((await t.app.inject({ method: 'PATCH', url: '/v1/units/cache-a', headers: bearer(t.keys.admin), payload: { temperatureUnit: 'F' } })).statusCode).toBe(200);
    expect((await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('cache-new') })).statusCode).toBe(201);

    const served = (await get('/v1/fleet')).json();
    const st = await fleetState(t.db.pool, null, Date.now());
    const whole = fleetRows(st.records, Date.parse(served.asOf), t.config.alerts.unitSilentS, st.starts);
    expect(board(served.units)).toEqual(board(whole as unknown as Array<Record<string, unknown>>));
    expect(served.units.find((u: { unitId: string }) => u.unitId === 'cache-new')).toMatchObject({ freshness: 'no_data', lastRingTs: null });
    expect(served.units.find((u: { unitId: string }) => u.unitId === 'cache-a')).toMatchObject({ temperatureUnit: 'F' });
    expect(served.units.find((u: { unitId: string }) => u.unitId === 'cache-many')).toMatchObject({ spreadC: 38, coverage: { valid: 17, total: 18 } });
  });
});
