/**
 * Swirl what-if: stored rings re-mapped with a candidate curve, nothing stored. The rings carry
 * one cold plume drawn with a wrapped Gaussian 14° wide (not the solver's von Mises kernel of
 * half a chamber pitch), so the check is the geometry, worked by hand below, not the solver
 * agreeing with itself.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { arcDistanceDeg } from '../../services/core/geometry.ts';
import { insertAnalyses, insertBaseline, type SyntheticAnalysis } from '../../services/db/synthetic.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';

const MIN = 60_000;
const T0 = Date.parse('2026-05-04T08:00:00Z');
const TC_ANGLES = Array.from({ length: 18 }, (_, i) => 10 + i * 20);
/**
 * Worked by hand. Ten chambers, chamber 1 at 0°, pitch 36°: chamber 3 at 72°, chamber 4 at 108°.
 * The configured swirl is 60° at every load, sense +1. The cold plume lands at 160° on the ring.
 * Current curve: 160 − 60 = 100° at the chambers; 100 / 36 = 2.78, nearest index 3: chamber 4
 * (8° from it, 28° from chamber 3).
 * Candidate, the curve shifted by 15° (75°): 160 − 75 = 85°; 85 / 36 = 2.36, nearest index 2:
 * chamber 3 (13° from it, 23° from chamber 4): the neighbour on the side of smaller angles,
 * since a larger swirl with sense +1 puts the source further back.
 */
const PLUME_DEG = 160;

let t: TestApp;
const url = '/v1/units/wi-1/swirl/what-if';
const window = { from: new Date(T0 - MIN).toISOString(), to: new Date(T0 + 60 * MIN).toISOString() };

beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('wi-1', { swirl: { sense: 1, curve: [[0.3, 60], [1.0, 60]] } }) });
  const rows: SyntheticAnalysis[] = [];
  for (let i = 0; i < 40; i++) {
    const ring = TC_ANGLES.map((a) => 548 - 40 * Math.exp(-0.5 * (arcDistanceDeg(a, PLUME_DEG) / 14) ** 2));
    const mean = ring.reduce((s, x) => s + x, 0) / ring.length;
    rows.push({ tsMs: T0 + i * MIN, loadFraction: 0.7 + (i % 5) * 0.05, spreadC: 40, spreadLimitC: 45, validity: Array(18).fill(0), tcDeviationC: ring.map((x) => x - mean), chamberDeviationC: Array(10).fill(0), swirlDeg: 60 });
  }
  await insertAnalyses(t.db.pool, 'wi-1', rows);

  // wi-2: the same cold plume, over a ring that always runs 10 °C hot at 276° (its built-in
  // asymmetry, there in the baseline's reference window too).
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('wi-2', { swirl: { sense: 1, curve: [[0.3, 60], [1.0, 60]] } }) });
  const hot = (a: number) => 10 * Math.exp(-0.5 * (arcDistanceDeg(a, 276) / 14) ** 2);
  const two: SyntheticAnalysis[] = [];
  const REF0 = T0 - 10 * 86_400_000;
  for (let i = 0; i < 40; i++) {
    for (const [t0, cold] of [[REF0, 0], [T0, 40]] as const) {
      const ring = TC_ANGLES.map((a) => 548 + hot(a) - cold * Math.exp(-0.5 * (arcDistanceDeg(a, PLUME_DEG) / 14) ** 2));
      const mean = ring.reduce((s, x) => s + x, 0) / ring.length;
      two.push({ tsMs: t0 + i * MIN, loadFraction: 0.7 + (i % 5) * 0.05, spreadC: 40, spreadLimitC: 45, validity: Array(18).fill(0), tcDeviationC: ring.map((x) => x - mean), chamberDeviationC: Array(10).fill(0), swirlDeg: 60 });
    }
  }
  await insertAnalyses(t.db.pool, 'wi-2', two);
  await insertBaseline(t.db.pool, 'wi-2', 1, REF0, REF0 + 60 * MIN);
});
afterAll(async () => t.close());

describe('POST /v1/units/:unitId/swirl/what-if', () => {
  it('a curve shifted by 15° moves the cold call from chamber 4 to its neighbour chamber 3, as the geometry predicts', async () => {
    const r = await t.app.inject({ method: 'POST', url, headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.3, 75], [1.0, 75]] } });
    expect(r.statusCode, r.body).toBe(200);
    const body = r.json();
    expect(body).toMatchObject({ ringsInWindow: 40, ringsExamined: 40, reference: null, stored: false, callMoves: true });
    expect(body.current.coldestChamber).toBe(4);
    expect(body.candidate.coldestChamber).toBe(3);
    expect(body.current.ringsUsed).toBe(40);
    // Without a baseline there is no normal: ranked by the estimate itself.
    expect(body.current.chambers.every((c: { residualC: null }) => c.residualC === null)).toBe(true);
    expect(body.candidate.chambers.find((c: { chamber: number }) => c.chamber === 3).rank).toBe(1);
    expect(body.advice).toContain('depends on the curve');
    // Sensitivity, by hand: one degree more swirl puts the source at 99° (current curve), further
    // from chamber 4 (108°) and nearer chamber 3 (72°): chamber 4's estimate warms, chamber 3's cools.
    const cur = Object.fromEntries(body.current.chambers.map((c: { chamber: number; sensitivityCPerDeg: number }) => [c.chamber, c.sensitivityCPerDeg]));
    expect(cur[4]).toBeGreaterThan(0);
    expect(cur[3]).toBeLessThan(0);
  });

  it('the same curve gives the same call, and says how much the coldest estimate moves per degree', async () => {
    const body = (await t.app.inject({ method: 'POST', url, headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.3, 60], [1.0, 60]] } })).json();
    expect(body.callMoves).toBe(false);
    expect(body.candidate.chambers).toEqual(body.current.chambers);
    expect(body.advice).toMatch(/Both curves name chamber 4 the coldest; its estimate moves \d+\.\d\d °C per degree/);
  });

  it('a shift smaller than the distance to the midpoint keeps the call (5°: 160 − 65 = 95°, 95 / 36 = 2.64: still chamber 4)', async () => {
    const body = (await t.app.inject({ method: 'POST', url, headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.3, 65], [1.0, 65]] } })).json();
    expect(body.candidate.coldestChamber).toBe(4);
    expect(body.callMoves).toBe(false);
  });

  it('refuses a curve that is not a curve, naming the point, and an unknown unit', async () => {
    const unsorted = await t.app.inject({ method: 'POST', url, headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.8, 60], [0.4, 70]] } });
    expect(unsorted.statusCode).toBe(422);
    expect(unsorted.json().details).toEqual([{ field: 'curve.1', reason: 'loads must be strictly increasing' }]);
    const missing = await t.app.inject({ method: 'POST', url, headers: bearer(t.keys.viewer), payload: window });
    expect(missing.statusCode).toBe(400);
    expect(missing.body).toContain('curve');
    const unknown = await t.app.inject({ method: 'POST', url: '/v1/units/no-unit/swirl/what-if', headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.5, 60]] } });
    expect(unknown.statusCode).toBe(404);
  });

  it('with a baseline, residuals take out the ring\'s own asymmetry, learnt from the reference window with the same curve', async () => {
    const body = (await t.app.inject({ method: 'POST', url: '/v1/units/wi-2/swirl/what-if', headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.3, 75], [1.0, 75]] } })).json();
    expect(body.reference).toMatchObject({ baselineVersion: 1, rings: 40 });
    expect(body.current.ringsWithoutNormal).toBe(0);
    expect([body.current.coldestChamber, body.candidate.coldestChamber]).toEqual([4, 3]);
    // The chamber map is linear in the readings, so the residual (window minus the normal of the
    // same band and curve) is the map of what the window holds beyond the reference: the cold
    // plume alone, which is what unit wi-1 (the same plume on a ring without the hot spot) shows.
    const plain = (await t.app.inject({ method: 'POST', url, headers: bearer(t.keys.viewer), payload: { ...window, curve: [[0.3, 75], [1.0, 75]] } })).json();
    for (const which of ['current', 'candidate'] as const) {
      body[which].chambers.forEach((c: { chamber: number; residualC: number; deviationC: number }, k: number) => {
        expect(c.residualC).toBeCloseTo(plain[which].chambers[k].deviationC, 2);
      });
      // The hot spot at 276° sits behind chamber 7 (216° + 60° = 276°): in its estimate, not in its residual.
      const c7 = body[which].chambers[6];
      expect(c7.deviationC - c7.residualC).toBeGreaterThan(3);
    }
  });

  it('stores nothing: the unit keeps its curve and version', async () => {
    const u = (await t.app.inject({ url: '/v1/units/wi-1', headers: bearer(t.keys.viewer) })).json();
    expect(u.swirl.curve).toEqual([[0.3, 60], [1.0, 60]]);
    expect(u.version).toBe(1);
  });
});
