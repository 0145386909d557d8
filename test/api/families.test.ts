/**
 * Fleet comparison by configuration family: units given a `family` are compared side by side,
 * each chamber position ranked coldest first, spreads taken at one corrected load. The seeded
 * residuals and spreads are invented; every expected rank, median, σ and spread below is worked
 * by hand from them.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { insertAnalyses, insertDriftStates } from '../../services/db/synthetic.ts';
import { compareFamily } from '../../services/core/family.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';

const MIN = 60_000;
const DAY = 86_400_000;
const END = Date.parse('2026-04-20T12:00:00Z');

let t: TestApp;

/** Residual of chamber 4 per unit; every other chamber 0 °C. */
const CH4 = { 'fa-1': 0.5, 'fa-2': -0.5, 'fa-3': -9, 'fa-4': 1 } as Record<string, number>;
/** Spreads of the steady rings at 80 % load in the last week. */
const SPREADS = { 'fa-1': [20, 22, 24], 'fa-2': [25, 25, 25], 'fa-3': [35, 36, 34], 'fa-4': [18, 30, 19] } as Record<string, number[]>;

async function seedUnit(id: string) {
  const residual = Array.from({ length: 10 }, (_, k) => (k === 3 ? CH4[id] : 0));
  const row = (tsMs: number, load: number, spreadC: number) => ({
    tsMs, loadFraction: load, spreadC, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0),
    chamberDeviationC: Array(10).fill(0), chamberResidualC: residual, swirlDeg: 60, baselineVersion: 1,
  });
  await insertAnalyses(t.db.pool, id, [
    // Ten days before the end: outside the 7-day window, so its spread of 90 °C is not used.
    row(END - 10 * DAY, 0.8, 90),
    // At half load: outside the ±5 % band around 80 %.
    row(END - 2 * DAY, 0.5, 80),
    ...SPREADS[id].map((s, i) => row(END - (3 - i) * MIN, 0.8, s)),
  ]);
}

beforeAll(async () => {
  t = await createTestApp();
  const admin = bearer(t.keys.admin);
  for (const id of Object.keys(CH4)) {
    await t.app.inject({ method: 'POST', url: '/v1/units', headers: admin, payload: unitBody(id, { family: 'frame-ten' }) });
    await seedUnit(id);
  }
  // fa-3's chamber 4 cooling by 3 °C per 30 days.
  await insertDriftStates(t.db.pool, 'fa-3', 1, Array.from({ length: 10 }, (_, k) => ({ subject: 'chamber' as const, index: k + 1, per30DaysC: k === 3 ? -3 : 0.1, intervalC: [-0.5, 0.5] as [number, number], sigmaC: 1, lastValueC: 0, lastDay: '2026-04-19', days: 30 })));
  // Same family name, another design: left out.
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: admin, payload: unitBody('fa-big', { family: 'frame-ten', chambers: { count: 12, firstAngleDeg: 0 } }) });
  // Another family, and a unit that joins by PATCH and then leaves.
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: admin, payload: unitBody('fb-1', { family: 'frame-six' }) });
});
afterAll(async () => t.close());

describe('family of a unit', () => {
  it('is kept, shown, changed in place and cleared with null; a bad name is refused', async () => {
    expect((await t.app.inject({ url: '/v1/units/fa-1', headers: bearer(t.keys.viewer) })).json().family).toBe('frame-ten');
    const moved = await t.app.inject({ method: 'PATCH', url: '/v1/units/fb-1', headers: bearer(t.keys.admin), payload: { family: 'frame-ten' } });
    expect(moved.json()).toMatchObject({ family: 'frame-ten', version: 1 });
    const cleared = await t.app.inject({ method: 'PATCH', url: '/v1/units/fb-1', headers: bearer(t.keys.admin), payload: { family: null } });
    expect(cleared.json().family).toBeNull();
    const bad = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('fa-bad', { family: 'Frame 10!' }) });
    expect(bad.statusCode).toBe(400);
    expect(bad.body).toContain('family');
  });
});

describe('GET /v1/fleet/families/:family', () => {
  it('ranks the unit whose chamber 4 is the coldest of the family first, with the family figures at that position', async () => {
    const r = await t.app.inject({ url: '/v1/fleet/families/frame-ten', headers: bearer(t.keys.viewer) });
    expect(r.statusCode, r.body).toBe(200);
    const body = r.json();
    expect(body).toMatchObject({ family: 'frame-ten', chambers: 10, thermocouples: 18 });
    expect(body.excluded).toEqual([{ unitId: 'fa-big', reason: expect.stringContaining('12 chambers') }]);
    // Default load: the median of the latest loads (all 0.8).
    expect(body.referenceLoad).toEqual({ fraction: 0.8, bandFraction: 0.05, days: 7 });
    // Chamber 4: residuals 0.5, −0.5, −9, 1 → median 0; |deviations| 0.5, 0.5, 9, 1 → MAD 0.75 → σ 0.75 × 1.4826 = 1.112.
    const p4 = body.positions[3];
    expect(p4.familyMedianC).toBeCloseTo(0, 6);
    expect(p4.familySigmaC).toBeCloseTo(1.11195, 4);
    expect(p4.ranking.map((x: { unitId: string; rank: number }) => [x.unitId, x.rank])).toEqual([['fa-3', 1], ['fa-2', 2], ['fa-1', 3], ['fa-4', 4]]);
    const first = body.units[0];
    expect(first).toMatchObject({ rank: 1, unitId: 'fa-3', coldestChamber: 4, coldestRankAtPosition: 1, fastestCoolingChamber: 4, fastestCoolingCPer30d: -3 });
    expect(first.coldestResidualC).toBeCloseTo(-9, 4);
    // −9 / 1.112 = −8.09 σ below the family.
    expect(first.coldestZ).toBeCloseTo(-8.094, 2);
    // Spreads at 80 ± 5 % over the last week (medians): fa-1 22, fa-2 25, fa-3 35, fa-4 19 → fa-3 widest.
    const spread = Object.fromEntries(body.units.map((u: { unitId: string; spreadC: number; spreadRank: number; spreadRings: number }) => [u.unitId, [u.spreadC, u.spreadRank, u.spreadRings]]));
    expect(spread).toEqual({ 'fa-1': [22, 3, 3], 'fa-2': [25, 2, 3], 'fa-3': [35, 1, 3], 'fa-4': [19, 4, 3] });
  });

  it('takes another load band when asked: no steady ring there, no spread', async () => {
    const body = (await t.app.inject({ url: '/v1/fleet/families/frame-ten?load=0.5&band=0.02', headers: bearer(t.keys.viewer) })).json();
    // Each unit has one ring at half load, 2 days back: its spread of 80 °C.
    expect(body.units.map((u: { spreadC: number }) => u.spreadC)).toEqual([80, 80, 80, 80]);
    const none = (await t.app.inject({ url: '/v1/fleet/families/frame-ten?load=1.0', headers: bearer(t.keys.viewer) })).json();
    expect(none.units.every((u: { spreadC: null; spreadRank: null }) => u.spreadC === null && u.spreadRank === null)).toBe(true);
  });

  it('sees only the units of the key; an unknown family is 404 naming how to set one', async () => {
    const key = await t.key('viewer', ['fa-3', 'fa-1']);
    const body = (await t.app.inject({ url: '/v1/fleet/families/frame-ten', headers: bearer(key) })).json();
    expect(body.units.map((u: { unitId: string }) => u.unitId).sort()).toEqual(['fa-1', 'fa-3']);
    const missing = await t.app.inject({ url: '/v1/fleet/families/no-such', headers: bearer(t.keys.viewer) });
    expect(missing.statusCode).toBe(404);
    expect(missing.json().message).toContain('"family": "no-such"');
  });

  it('draws the family: a row per unit in rank order, the coldest unit at chamber 4 framed', async () => {
    const r = await t.app.inject({ url: '/v1/fleet/families/frame-ten/family.svg', headers: bearer(t.keys.viewer) });
    expect(r.statusCode).toBe(200);
    expect(r.headers['content-type']).toContain('image/svg+xml');
    const svg = r.body;
    expect(svg.indexOf('1. fa-3')).toBeGreaterThan(0);
    expect(svg.indexOf('1. fa-3')).toBeLessThan(svg.indexOf('2. '));
    expect(svg).toContain('-9.0 ¹');
    expect(svg).toContain('35.0 °C (1)');
  });
});

describe('compareFamily', () => {
  it('two units: no σ, ranks by residual, ties share a rank', () => {
    const r = compareFamily([
      { unitId: 'a', residualsC: [-2, 1], driftCPer30d: [null, null], spreadC: 30 },
      { unitId: 'b', residualsC: [-2, null], driftCPer30d: [null, -1], spreadC: null },
    ], 2);
    expect(r.positions[0].familySigmaC).toBeNull();
    expect(r.positions[0].ranking.map((x) => x.rank)).toEqual([1, 1]);
    expect(r.positions[1].ranking).toEqual([{ unitId: 'a', residualC: 1, rank: 1, belowFamilyC: 0 }, { unitId: 'b', residualC: null, rank: null, belowFamilyC: null }]);
    expect(r.units.find((u) => u.unitId === 'b')).toMatchObject({ spreadRank: null, fastestCoolingChamber: 2, coldestZ: null });
  });
});
