/**
 * The read routes on made-up analysis: fleet, analysis series, chambers, chamber trend,
 * thermocouples, swirl calibration; their schemas, status codes and window limits.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { insertAnalyses } from '../../services/db/synthetic.ts';
import { CONFIG, DAY_MS, MIN_MS, ringWithColdChamber, seedUnit, type Seeded } from './read-fixtures.ts';

let t: TestApp;
let seeded: Seeded;
const get = (url: string, key = t.keys.viewer, headers: Record<string, string> = {}) => t.app.inject({ url, headers: { ...bearer(key), ...headers } });

beforeAll(async () => {
  t = await createTestApp();
  for (const id of ['read-a', 'read-b', 'read-quiet']) {
    const res = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id, { name: `Unit ${id}` }) });
    expect(res.statusCode).toBe(201);
  }
  seeded = await seedUnit(t.db.pool, 'read-a', Date.now());
  // read-b: one ring, healthy, an hour old.
  await insertAnalyses(t.db.pool, 'read-b', [
    { tsMs: Date.now() - 3_600_000, loadFraction: 0.7, spreadC: 20, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0), chamberDeviationC: Array(10).fill(0), swirlDeg: 70 },
  ]);
});
afterAll(async () => t.close());

describe('GET /v1/fleet', () => {
  it('lists every unit, worst active alert first, with freshness, spread, limit and coverage', async () => {
    const res = await get('/v1/fleet');
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(Date.parse(body.asOf)).toBeGreaterThan(0);
    expect(body.units.map((u: { unitId: string }) => u.unitId)).toEqual(['read-a', 'read-b', 'read-quiet']);
    const a = body.units[0];
    expect(a).toMatchObject({ name: 'Unit read-a', site: 'Test Site', temperatureUnit: 'C', worstGrade: 'alarm', activeAlerts: 2, unacknowledged: 2, shelvedAlerts: 0, freshness: 'live', spreadLimitC: 40, coverage: { valid: 17, total: 18 } });
    expect(a.spreadC).toBeGreaterThanOrEqual(28);
    expect(a.loadFraction).toBeCloseTo(0.9, 5);
    expect(body.units[1]).toMatchObject({ unitId: 'read-b', worstGrade: null, freshness: 'silent', activeAlerts: 0 });
    expect(body.units[2]).toMatchObject({ unitId: 'read-quiet', freshness: 'no_data', lastRingTs: null, spreadC: null, coverage: null });
  });

  it('shows a key limited to some units only those units', async () => {
    const key = await t.key('viewer', ['read-b']);
    const res = await get('/v1/fleet', key);
    expect(res.json().units.map((u: { unitId: string }) => u.unitId)).toEqual(['read-b']);
  });

  it('puts a shelved alert aside: it no longer sets the worst grade', async () => {
    const shelve = await t.app.inject({ method: 'POST', url: `/v1/alerts/${seeded.alertIds[0]}/shelve`, headers: bearer(t.keys.operator), payload: { by: 'shift operator 1', until: new Date(Date.now() + 3_600_000).toISOString(), reason: 'crew on site' } });
    if (shelve.statusCode === 404) return; // the alert actions are not registered in this build
    expect(shelve.statusCode).toBe(200);
    const a = (await get('/v1/fleet')).json().units.find((u: { unitId: string }) => u.unitId === 'read-a');
    expect(a).toMatchObject({ worstGrade: 'warning', activeAlerts: 1, shelvedAlerts: 1 });
    await t.app.inject({ method: 'POST', url: `/v1/alerts/${seeded.alertIds[0]}/unshelve`, headers: bearer(t.keys.operator), payload: { by: 'shift operator 1' } });
  });
});

describe('GET /v1/units/:unitId/analysis', () => {
  it('gives one-minute buckets from the analysed rings', async () => {
    const from = new Date(seeded.endMs - 60 * MIN_MS).toISOString();
    const to = new Date(seeded.endMs + MIN_MS).toISOString();
    const res = await get(`/v1/units/read-a/analysis?every=1m&from=${from}&to=${to}`);
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(body).toMatchObject({ unitId: 'read-a', every: '1m', source: 'rings' });
    expect(body.buckets).toHaveLength(61);
    expect(body.buckets[0].rings).toBe(1);
    expect(body.buckets[0].spreadLimitC.mean).toBe(40);
    expect(body.buckets[0].validCount.mean).toBe(17);
  });

  it('gives hourly and daily buckets from the rollups', async () => {
    const hourly = (await get(`/v1/units/read-a/analysis?every=1h&from=${new Date(seeded.endMs - 2 * DAY_MS).toISOString()}&to=${new Date(seeded.endMs).toISOString()}`)).json();
    expect(hourly.source).toBe('rollups');
    expect(hourly.buckets.length).toBeGreaterThanOrEqual(47);
    expect(hourly.buckets[0].spreadC.mean).toBeCloseTo(27, 4);
    expect(hourly.buckets[0].rings).toBe(60);
    const daily = (await get(`/v1/units/read-a/analysis?every=1d&from=${new Date(seeded.endMs - 365 * DAY_MS).toISOString()}&to=${new Date(seeded.endMs).toISOString()}`)).json();
    expect(daily.buckets.length).toBeGreaterThanOrEqual(364);
    expect(daily.buckets[0].loadFraction.mean).toBeCloseTo(0.85, 4);
  });

  const refused: Array<[string, string, RegExp]> = [
    ['eight days at one minute', `every=1m&from=${new Date(Date.now() - 8 * DAY_MS).toISOString()}`, /7 days/],
    ['ten years at one hour', `every=1h&from=${new Date(Date.now() - 3650 * DAY_MS).toISOString()}`, /400 days/],
    ['eleven years at one day', `every=1d&from=${new Date(Date.now() - 4000 * DAY_MS).toISOString()}`, /3700 days/],
    ['an inverted window', `from=${new Date(Date.now()).toISOString()}&to=${new Date(Date.now() - DAY_MS).toISOString()}`, /before/],
    ['a resolution of five minutes', 'every=5m', /every/],
    ['a time that is not RFC 3339', 'from=yesterday', /from/],
    ['an unknown parameter', 'limit=5', /limit/],
  ];
  for (const [what, qs, message] of refused) {
    it(`refuses ${what} with 400 and says why`, async () => {
      const res = await get(`/v1/units/read-a/analysis?${qs}`);
      expect(res.statusCode).toBe(400);
      expect(res.json().error).toBe('bad_request');
      expect(res.json().message).toMatch(message);
    });
  }

  it('answers 404 for an unknown unit', async () => {
    const res = await get('/v1/units/no-such/analysis', t.keys.admin);
    expect(res.statusCode).toBe(404);
    expect(res.json()).toMatchObject({ error: 'not_found' });
  });
});

describe('GET /v1/units/:unitId/chambers and trend', () => {
  it('gives per chamber the residual, drift with interval, CUSUM, baseline and active alert', async () => {
    const res = await get('/v1/units/read-a/chambers');
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(body.chambers).toHaveLength(10);
    expect(body.worstChamber).toBe(4);
    const c4 = body.chambers[3];
    expect(c4).toMatchObject({ chamber: 4, angleDeg: 108, residualC: -11, deviationC: -24, driftCPer30d: -6, driftIntervalCPer30d: [-7, -5], driftSignificant: true, baselineVersion: 1, activeGrade: 'alarm' });
    expect(c4.cusum).toMatchObject({ signal: 'down', lower: 9 });
    expect(c4.plumeAngleDeg).toBeCloseTo(108 + 59.75, 6); // ψ(0.9) = 74 − 0.75·19
    expect(body.chambers[0]).toMatchObject({ activeGrade: null, driftSignificant: false });
    expect(body.chambers[0].cusum.signal).toBeNull();
  });

  it('gives a chamber\'s residual trend daily over a year and hourly over two weeks', async () => {
    const year = await get(`/v1/units/read-a/chambers/4/trend?from=${new Date(seeded.endMs - 365 * DAY_MS).toISOString()}&to=${new Date(seeded.endMs).toISOString()}`);
    expect(year.statusCode).toBe(200);
    const y = year.json();
    expect(y).toMatchObject({ chamber: 4, every: '1d', baselineVersion: 1 });
    expect(y.points.length).toBeGreaterThanOrEqual(364);
    expect(y.points.at(-1).meanC).toBeLessThan(-10);
    expect(y.points[0].meanC).toBe(0);
    const weeks = (await get(`/v1/units/read-a/chambers/4/trend?from=${new Date(seeded.endMs - 14 * DAY_MS).toISOString()}&to=${new Date(seeded.endMs).toISOString()}`)).json();
    expect(weeks.every).toBe('1h');
    expect(weeks.points.length).toBeGreaterThanOrEqual(14 * 24 - 1);
    expect(weeks.points[0].sdC).toBeCloseTo(1, 3);
  });

  it('answers 404 for a chamber the unit does not have, and 400 for chamber 0', async () => {
    expect((await get('/v1/units/read-a/chambers/11/trend')).statusCode).toBe(404);
    expect((await get('/v1/units/read-a/chambers/0/trend')).statusCode).toBe(400);
  });
});

describe('GET /v1/units/:unitId/thermocouples', () => {
  it('marks the out-of-range thermocouple not used and puts it on the replace list', async () => {
    const res = await get('/v1/units/read-a/thermocouples');
    expect(res.statusCode).toBe(200);
    const rows = res.json().thermocouples;
    expect(rows).toHaveLength(18);
    expect(res.json().ringsLast7Days).toBe(120);
    const tc7 = rows[6];
    expect(tc7).toMatchObject({ thermocouple: 7, angleDeg: 130, valid: false, reason: 'out_of_range', invalidShare: 1, invalidReasons: { out_of_range: 120 }, openFault: true, replace: true });
    expect(tc7.verdict).toContain('thermocouple 7');
    expect(tc7.history.length).toBeGreaterThanOrEqual(9);
    expect(rows.filter((r: { replace: boolean }) => r.replace).map((r: { thermocouple: number }) => r.thermocouple)).toEqual([7]);
    expect(rows[0]).toMatchObject({ valid: true, reason: null, invalidShare: 0 });
    expect(rows[0].chamberBehind).toBeGreaterThanOrEqual(1);
  });
});

describe('POST /v1/units/:unitId/swirl/calibrate', () => {
  const truth: [number, number][] = [[0.4, 80], [0.7, 66], [1.0, 52]];
  beforeAll(async () => {
    const unitCfg = { ...CONFIG, swirl: { sense: 1 as const, curve: truth } };
    const rows = [];
    const start = Date.now() - 3 * DAY_MS;
    for (let i = 0; i < 240; i++) {
      const load = 0.4 + (0.6 * i) / 239;
      const exhaust = ringWithColdChamber(unitCfg, 3, load, 45, 14);
      rows.push({ tsMs: start + i * MIN_MS, loadFraction: load, spreadC: 45, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0), chamberDeviationC: Array(10).fill(0), swirlDeg: 0, exhaustC: exhaust });
    }
    await insertAnalyses(t.db.pool, 'read-b', rows);
  });

  it('recovers the swirl curve of a window with a known cold chamber', async () => {
    const res = await t.app.inject({
      method: 'POST', url: '/v1/units/read-b/swirl/calibrate', headers: bearer(t.keys.viewer),
      payload: { from: new Date(Date.now() - 3 * DAY_MS - MIN_MS).toISOString(), to: new Date(Date.now() - 2 * DAY_MS).toISOString(), chamber: 3 },
    });
    expect(res.statusCode, res.body).toBe(200);
    const body = res.json();
    expect(body.fitted).toBe(true);
    expect(body.ringsInWindow).toBe(240);
    expect(body.ringsUsed).toBeGreaterThan(200);
    expect(body.curve.length).toBeGreaterThanOrEqual(2);
    // The fitted curve at the true knots, within a few degrees (corrected load ≈ load on the ISO-like day).
    const at = (l: number) => {
      const c = body.curve as [number, number][];
      for (let i = 1; i < c.length; i++) if (l <= c[i][0]) return c[i - 1][1] + ((l - c[i - 1][0]) / (c[i][0] - c[i - 1][0])) * (c[i][1] - c[i - 1][1]);
      return c[c.length - 1][1];
    };
    for (const [l, s] of truth) expect(Math.abs(at(l) - s)).toBeLessThan(4);
    expect(body.rmsResidualDeg).toBeLessThan(4);
    expect(body.bands.length).toBeGreaterThan(5);
    expect(body.currentCurve).toEqual([[0.3, 92], [0.6, 74], [1, 55]]);
  });

  it('refuses a window over 31 days, a chamber the unit lacks and extra fields; says why a window without rings gives no fit', async () => {
    const post = (payload: object) => t.app.inject({ method: 'POST', url: '/v1/units/read-b/swirl/calibrate', headers: bearer(t.keys.viewer), payload });
    const long = await post({ from: new Date(Date.now() - 40 * DAY_MS).toISOString(), to: new Date().toISOString(), chamber: 3 });
    expect(long.statusCode).toBe(400);
    expect(long.json().message).toMatch(/31 days/);
    expect((await post({ from: new Date(Date.now() - DAY_MS).toISOString(), to: new Date().toISOString(), chamber: 12 })).statusCode).toBe(404);
    expect((await post({ from: new Date(Date.now() - DAY_MS).toISOString(), to: new Date().toISOString(), chamber: 3, colour: 'red' })).statusCode).toBe(400);
    const empty = await post({ from: new Date(Date.now() - 30 * DAY_MS).toISOString(), to: new Date(Date.now() - 25 * DAY_MS).toISOString(), chamber: 3 });
    expect(empty.statusCode).toBe(200);
    expect(empty.json()).toMatchObject({ fitted: false, ringsInWindow: 0, curve: [] });
    expect(empty.json().advice).toMatch(/no rings/);
  });
});
