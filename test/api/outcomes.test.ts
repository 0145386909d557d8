/**
 * Inspection outcomes: recorded against chamber and thermocouple alerts, counted per kind by
 * unit, site and fleet, with the lead time from the first alert on a chamber or thermocouple to
 * the inspection. Every expected count and lead time below is worked by hand from the seeded
 * alerts and outcomes.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { seedAlert } from '../helpers/alerts.ts';

const DAY = 86_400_000;
const D0 = Date.parse('2026-02-01T00:00:00Z');
const day = (d: number) => new Date(D0 + d * DAY);

let t: TestApp;
const ids: Record<string, string> = {};

async function outcome(id: string, body: object, key = t.keys.operator) {
  return t.app.inject({ method: 'POST', url: `/v1/alerts/${id}/outcome`, headers: bearer(key), payload: body });
}

beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('oc-a', { site: 'North' }) });
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('oc-b', { site: 'South' }) });
  const p = t.db.pool;
  // Unit oc-a: chamber 4 drifts from day 0 and goes cold on day 10, both confirmed at the outage on day 30;
  // thermocouple 7 called on day 5, found sound on day 30; chamber 2 called cold on day 20, still open.
  ids.aDrift4 = (await seedAlert(p, { unitId: 'oc-a', kind: 'chamber_drift', chamber: 4, raisedAt: day(0) })).id;
  ids.aCold4 = (await seedAlert(p, { unitId: 'oc-a', kind: 'chamber_cold', chamber: 4, raisedAt: day(10) })).id;
  ids.aTc7 = (await seedAlert(p, { unitId: 'oc-a', kind: 'thermocouple_fault', thermocouple: 7, raisedAt: day(5) })).id;
  ids.aCold2 = (await seedAlert(p, { unitId: 'oc-a', kind: 'chamber_cold', chamber: 2, raisedAt: day(20) })).id;
  ids.aSpread = (await seedAlert(p, { unitId: 'oc-a', kind: 'spread_high', raisedAt: day(21) })).id;
  // Unit oc-b: chamber 1 cold on day 3, confirmed on day 13; chamber 6 hot on day 1, closed without a look.
  ids.bCold1 = (await seedAlert(p, { unitId: 'oc-b', kind: 'chamber_cold', chamber: 1, raisedAt: day(3) })).id;
  ids.bHot6 = (await seedAlert(p, { unitId: 'oc-b', kind: 'chamber_hot', chamber: 6, raisedAt: day(1) })).id;
});
afterAll(async () => t.close());

describe('recording an outcome', () => {
  it('refuses what does not make sense, naming the field', async () => {
    const noFound = await outcome(ids.aCold4, { by: 'combustion engineer', outcome: 'confirmed', inspectedAt: day(30).toISOString() });
    expect(noFound.statusCode).toBe(422);
    expect(noFound.json().details).toEqual([{ field: 'found', reason: 'required when confirmed' }]);
    const noTime = await outcome(ids.aCold4, { by: 'combustion engineer', outcome: 'not_found' });
    expect(noTime.statusCode).toBe(422);
    expect(noTime.json().message).toContain('inspectedAt');
    const early = await outcome(ids.aCold4, { by: 'combustion engineer', outcome: 'not_found', inspectedAt: day(9).toISOString() });
    expect(early.statusCode).toBe(422);
    expect(early.json().details[0].reason).toBe('before the alert was raised');
    const spread = await outcome(ids.aSpread, { by: 'combustion engineer', outcome: 'not_found', inspectedAt: day(30).toISOString() });
    expect(spread.statusCode).toBe(422);
    expect(spread.json().message).toContain('spread_high');
    const badValue = await outcome(ids.aCold4, { by: 'combustion engineer', outcome: 'maybe' });
    expect(badValue.statusCode).toBe(400);
    expect(badValue.body).toContain('not_found');
    expect((await outcome('6f1d2c3b-0000-4000-8000-000000000000', { by: 'x', outcome: 'not_inspected' })).statusCode).toBe(404);
    expect((await outcome(ids.aCold4, { by: 'x', outcome: 'not_inspected' }, t.keys.viewer)).statusCode).toBe(403);
  });

  it('stores the outcome and acknowledges the alert, keeping the outcome in its history', async () => {
    const r = await outcome(ids.aCold4, { by: 'combustion engineer', outcome: 'confirmed', found: 'nozzle 4 half plugged with coke', inspectedAt: day(30).toISOString() });
    expect(r.statusCode, r.body).toBe(200);
    expect(r.json().outcome).toMatchObject({ outcome: 'confirmed', found: 'nozzle 4 half plugged with coke', inspectedAt: day(30).toISOString(), recordedBy: 'combustion engineer' });
    const a = (await t.app.inject({ url: `/v1/alerts/${ids.aCold4}`, headers: bearer(t.keys.viewer) })).json();
    expect(a.acknowledged).toBe(true);
    expect(a.history.at(-1).comment).toContain('confirmed');
    for (const [id, body] of [
      [ids.aDrift4, { outcome: 'confirmed', found: 'same nozzle', inspectedAt: day(30).toISOString() }],
      [ids.aTc7, { outcome: 'not_found', found: 'probe and wiring sound', inspectedAt: day(30).toISOString() }],
      [ids.bCold1, { outcome: 'confirmed', found: 'check valve stuck', inspectedAt: day(13).toISOString() }],
      [ids.bHot6, { outcome: 'not_inspected' }],
    ] as const) {
      const res = await outcome(id, { by: 'combustion engineer', ...body });
      expect(res.statusCode, res.body).toBe(200);
    }
  });
});

describe('counting outcomes', () => {
  const kind = (counts: Array<{ kind: string }>, k: string) => counts.find((c) => c.kind === k) as Record<string, unknown>;

  it('per unit: each call with where its lead time starts, and the counts per kind', async () => {
    const r = await t.app.inject({ url: '/v1/units/oc-a/outcomes', headers: bearer(t.keys.viewer) });
    expect(r.statusCode).toBe(200);
    const body = r.json();
    // spread_high names no chamber: not a call to inspect.
    expect(body.calls.map((c: { alertId: string }) => c.alertId).sort()).toEqual([ids.aDrift4, ids.aCold4, ids.aTc7, ids.aCold2].sort());
    // The cold alert of chamber 4 (day 10) belongs to the episode that began with its drift alert (day 0).
    expect(body.calls.find((c: { alertId: string }) => c.alertId === ids.aCold4).firstAlertAt).toBe(day(0).toISOString());
    // chamber_cold on oc-a: chamber 4 confirmed (30 days from day 0 to day 30), chamber 2 open.
    expect(kind(body.counts, 'chamber_cold')).toEqual({ kind: 'chamber_cold', calls: 2, confirmed: 1, notFound: 0, notInspected: 0, open: 1, precision: 1, leadTimeDays: { count: 1, median: 30, min: 30, max: 30 } });
    expect(kind(body.counts, 'thermocouple_fault')).toMatchObject({ calls: 1, notFound: 1, precision: 0, leadTimeDays: { count: 0, median: null } });
  });

  it('fleet, by site and by unit: confirmed, not found and open per kind, with lead times', async () => {
    const body = (await t.app.inject({ url: '/v1/fleet/outcomes', headers: bearer(t.keys.viewer) })).json();
    // chamber_cold over the fleet: oc-a chamber 4 (30 d), oc-b chamber 1 (day 3 to day 13: 10 d), oc-a chamber 2 open.
    expect(kind(body.fleet, 'chamber_cold')).toEqual({ kind: 'chamber_cold', calls: 3, confirmed: 2, notFound: 0, notInspected: 0, open: 1, precision: 1, leadTimeDays: { count: 2, median: 20, min: 10, max: 30 } });
    expect(kind(body.fleet, 'chamber_drift')).toMatchObject({ calls: 1, confirmed: 1, leadTimeDays: { median: 30 } });
    expect(kind(body.fleet, 'chamber_hot')).toMatchObject({ calls: 1, notInspected: 1, open: 0, precision: null });
    expect(kind(body.fleet, 'thermocouple_fault')).toMatchObject({ calls: 1, notFound: 1, precision: 0 });
    expect(body.sites.map((s: { site: string }) => s.site)).toEqual(['North', 'South']);
    expect(kind(body.sites[1].counts, 'chamber_cold')).toMatchObject({ calls: 1, confirmed: 1, leadTimeDays: { median: 10 } });
    expect(body.units.map((u: { unitId: string; site: string }) => [u.unitId, u.site])).toEqual([['oc-a', 'North'], ['oc-b', 'South']]);
  });

  it('a key limited to one unit counts that unit only', async () => {
    const key = await t.key('viewer', ['oc-b']);
    const body = (await t.app.inject({ url: '/v1/fleet/outcomes', headers: bearer(key) })).json();
    expect(body.units.map((u: { unitId: string }) => u.unitId)).toEqual(['oc-b']);
    expect(kind(body.fleet, 'chamber_cold')).toMatchObject({ calls: 1, confirmed: 1 });
  });

  it('the pre-outage review lists the open call and the outcomes', async () => {
    const html = (await t.app.inject({ url: `/v1/units/oc-a/review?from=${day(-1).toISOString()}&to=${day(40).toISOString()}`, headers: bearer(t.keys.viewer) })).body;
    const section = html.slice(html.indexOf('Calls to inspect and their outcomes'), html.indexOf('<h2>Alerts in the window'));
    expect(section).toContain('open: to inspect');
    expect(section).toContain('nozzle 4 half plugged with coke');
    expect(section).toContain('probe and wiring sound');
    // The open call comes first.
    expect(section.indexOf('open: to inspect')).toBeLessThan(section.indexOf('confirmed'));
  });
});
