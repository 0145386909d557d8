import { describe, expect, it } from 'vitest';
import {
  analyseRing,
  copyRingAnalysis,
  coverage,
  evaluateFindings,
  prepareUnit,
  ringAnalysisToJson,
  spreadMetrics,
  swirlDeg,
  VALIDITY,
  windowValidity,
} from '../../services/core/index.ts';
import { demoConfig, mulberry32, normalSource, realisticRing } from './helpers.ts';

const flat = (v = 550, m = 18) => Array.from({ length: m }, () => v);

describe('spread metrics', () => {
  it('computes spread, spread without the one and two coldest, and where the coldest sit', () => {
    const s = spreadMetrics([500, 520, 510, 480]);
    expect(s.spreadDegC).toBe(40);
    expect(s.spreadExcl1DegC).toBe(20);
    expect(s.spreadExcl2DegC).toBe(10);
    expect(s.coldestThermocouple).toBe(4);
    expect(s.secondColdestThermocouple).toBe(1);
    expect(s.coldestAdjacent).toBe(true); // 4 and 1 are ring neighbours
    expect(s.hottestThermocouple).toBe(2);
    expect(s.meanDegC).toBe(502.5);
    expect(s.robustCentreDegC).toBe(505);
    expect(s.stdDevDegC).toBeCloseTo(Math.sqrt((2.5 ** 2 + 17.5 ** 2 + 7.5 ** 2 + 22.5 ** 2) / 3), 10);
  });
});

describe('ring validity', () => {
  const ctx = prepareUnit(demoConfig());
  it('marks missing, out-of-range and isolated outliers with their reasons, and excludes them', () => {
    const r = flat();
    r[2] = Number.NaN;
    r[5] = 20; // open circuit reading near ambient
    r[11] = 680; // lone hot reading
    (r as (number | null)[])[14] = null;
    const a = analyseRing(ctx, r, 0.8);
    expect(a.validity[2]).toBe(VALIDITY.missing);
    expect(a.validity[14]).toBe(VALIDITY.missing);
    expect(a.validity[5]).toBe(VALIDITY.out_of_range);
    expect(a.validity[11]).toBe(VALIDITY.isolated_outlier);
    expect(a.spread.spreadDegC).toBe(0);
    expect(a.spread.validCount).toBe(14);
    const j = ringAnalysisToJson(a);
    expect(j.invalid).toEqual([
      { thermocouple: 3, reason: 'missing' },
      { thermocouple: 6, reason: 'out_of_range' },
      { thermocouple: 12, reason: 'isolated_outlier' },
      { thermocouple: 15, reason: 'missing' },
    ]);
  });
  it('does not call a reading an outlier when a neighbour shares the deviation (a plume)', () => {
    const r = flat();
    r[7] = 450;
    r[8] = 470;
    const a = analyseRing(ctx, r, 0.8);
    expect(a.validity[7]).toBe(VALIDITY.valid);
    expect(a.validity[8]).toBe(VALIDITY.valid);
    expect(a.spread.coldestAdjacent).toBe(true);
  });
  it('treats readings beyond the ring length as missing', () => {
    const a = analyseRing(ctx, flat(550, 10), 0.8);
    expect(a.coverage.validCount).toBe(10);
    expect(a.validity[17]).toBe(VALIDITY.missing);
  });
});

describe('coverage', () => {
  it('is degraded with two adjacent failed thermocouples even when 89 % are valid', () => {
    const codes = new Uint8Array(18);
    codes[4] = VALIDITY.missing;
    codes[5] = VALIDITY.out_of_range;
    const c = coverage(codes);
    expect(c).toMatchObject({ validCount: 16, longestInvalidRun: 2, degraded: true, reason: 'adjacent_failed' });
  });
  it('counts a run across the ring join (thermocouples 18 and 1)', () => {
    const codes = new Uint8Array(18);
    codes[0] = VALIDITY.missing;
    codes[17] = VALIDITY.missing;
    expect(coverage(codes).longestInvalidRun).toBe(2);
  });
  it('is degraded below 75 % valid', () => {
    const codes = new Uint8Array(8);
    codes[0] = codes[2] = codes[4] = VALIDITY.missing;
    expect(coverage(codes).reason).toBe('too_few_valid');
  });
});

describe('edge cases', () => {
  const ctx = prepareUnit(demoConfig());
  it('all readings missing: no spread, no chambers, coverage alarm, no throw', () => {
    const a = analyseRing(ctx, Array(18).fill(null), 0.8);
    expect(a.spread.spreadDegC).toBeNaN();
    expect(a.coverage.reason).toBe('no_valid');
    expect(Number.isNaN(a.chamberDeviationDegC[0])).toBe(true);
    expect(a.worstChamber).toBeNull();
    const f = evaluateFindings({ analysis: a, steady: true });
    expect(f.find((x) => x.kind === 'coverage_degraded')?.grade).toBe('alarm');
    expect(f.some((x) => x.kind === 'chamber_cold' || x.kind === 'chamber_hot')).toBe(false);
  });
  it('one valid thermocouple: spread 0, no spread without the coldest, no chamber estimates', () => {
    const r: (number | null)[] = Array(18).fill(null);
    r[4] = 550;
    const a = analyseRing(ctx, r, 0.8);
    expect(a.spread.spreadDegC).toBe(0);
    expect(a.spread.spreadExcl1DegC).toBeNaN();
    expect(a.spread.coldestThermocouple).toBe(5);
    expect(a.worstChamber).toBeNull();
  });
  it('NaN, Infinity and −Infinity are missing', () => {
    const r = flat();
    r[0] = Number.NaN;
    r[1] = Number.POSITIVE_INFINITY;
    r[2] = Number.NEGATIVE_INFINITY;
    const a = analyseRing(ctx, r, Number.NaN);
    expect([a.validity[0], a.validity[1], a.validity[2]]).toEqual([VALIDITY.missing, VALIDITY.missing, VALIDITY.missing]);
    expect(a.swirlDeg).toBe(92); // non-finite load uses the start of the curve
  });
  it('a swirl curve of one point is a constant and needs one solver bin', () => {
    const c = prepareUnit(demoConfig({ swirl: { sense: 1, curve: [[0.8, 40]] } }));
    expect(c.binCount).toBe(1);
    expect(analyseRing(c, flat(), 0.2).swirlDeg).toBe(40);
    expect(analyseRing(c, flat(), 1.3).swirlDeg).toBe(40);
  });
  it('loads outside the curve clamp to its ends', () => {
    expect(swirlDeg(demoConfig().swirl.curve, 0.1)).toBe(92);
    expect(swirlDeg(demoConfig().swirl.curve, 1.4)).toBe(55);
    expect(analyseRing(ctx, flat(), 1.4).swirlDeg).toBe(55);
  });
  it('rejects an unusable configuration with a message that names the field', () => {
    expect(() => prepareUnit(demoConfig({ thermocouples: { count: 18, anglesDeg: [0, 10] } }))).toThrow(/anglesDeg/);
    expect(() => prepareUnit(demoConfig({ swirl: { sense: 1, curve: [] } }))).toThrow(/swirl.curve/);
  });
});

describe('chamber estimates', () => {
  const config = demoConfig();
  const ctx = prepareUnit(config);
  /**
   * Rings of a unit that is not its model (realisticRing): Gaussian plumes of a true width other
   * than the solver's von Mises 0.5 pitch, chamber fingerprints of ±4 °C, probe offsets across
   * half the class-2 band and 0.35 °C noise, all drawn from a fixed seed.
   */
  const unitRing = (dev: number[], widthFrac: number, seed = 11) => {
    const rand = mulberry32(seed);
    return realisticRing(config, dev, 0.8, 550, {
      widthFrac,
      fingerprintDegC: Array.from({ length: 10 }, () => (rand() - 0.5) * 8),
      offsetFrac: Array.from({ length: 18 }, () => rand() - 0.5),
      normal: normalSource(rand),
    });
  };
  // The solver's 0.5 pitch, and 30 % narrower and wider true plumes.
  it.each([0.35, 0.5, 0.65])('finds a deep cold chamber first, its runner-up a neighbour, its uncertainty small (true plume width %f of the pitch)', (w) => {
    const dev = new Array(10).fill(0);
    dev[3] = -100;
    const a = analyseRing(ctx, unitRing(dev, w), 0.8);
    expect(a.worstChamber).toBe(4);
    expect(a.coldestChamber).toBe(4);
    expect([3, 5]).toContain(a.runnerUpChamber);
    expect(a.runnerUpLikelihood).toBeLessThan(0.5);
    // Relative to the average chamber, whose share of the −100 °C is +10 °C; fingerprints and the
    // kernel mismatch take some of it.
    expect(a.chamberDeviationDegC[3]).toBeLessThan(-75);
    expect(a.chamberDeviationDegC[3]).toBeGreaterThan(-115);
    // Under a tenth of the departure (a plume narrower than the kernel fits least well).
    expect(a.chamberUncertaintyDegC[3]).toBeLessThan(10);
  });
  it.each([0.35, 0.5, 0.65])('splits the likelihood when the plume lands halfway between two chambers (true plume width %f of the pitch)', (w) => {
    const dev = new Array(10).fill(0);
    dev[3] = -60;
    dev[4] = -60;
    const a = analyseRing(ctx, unitRing(dev, w), 0.8);
    expect([4, 5]).toContain(a.worstChamber);
    expect([4, 5]).toContain(a.runnerUpChamber);
    expect(a.runnerUpLikelihood).toBeGreaterThan(0.3);
  });
  it('builds a new solver when the validity mask changes, and keeps the cache bounded', () => {
    const small = prepareUnit(config, { maxCachedSolvers: 4 });
    for (let i = 0; i < 18; i++) {
      const r = flat();
      r[i] = Number.NaN;
      analyseRing(small, r, 0.8);
    }
    expect(small.solversBuilt).toBe(18);
    expect(small.cache.size).toBeLessThanOrEqual(4);
    const before = small.solversBuilt;
    analyseRing(small, flat(), 0.8);
    analyseRing(small, flat(), 0.8);
    expect(small.solversBuilt).toBe(before + 1);
  });
  it('an invalid thermocouple changes the matrix but not a plume it does not sit under', () => {
    const dev = new Array(10).fill(0);
    dev[3] = -100;
    const ring = unitRing(dev, 0.65);
    const full = copyRingAnalysis(analyseRing(ctx, ring, 0.8));
    const far = full.spread.hottestThermocouple as number;
    const r2 = Array.from(ring) as (number | null)[];
    r2[far - 1] = null;
    const part = analyseRing(ctx, r2, 0.8);
    expect(part.worstChamber).toBe(4);
    expect(Math.abs(part.chamberDeviationDegC[3] - full.chamberDeviationDegC[3])).toBeLessThan(10);
  });
  it('writes into a caller-provided result and leaves the context result alone', () => {
    const out = copyRingAnalysis(ctx.result);
    const a = analyseRing(ctx, flat(560), 0.8, out);
    expect(a).toBe(out);
    expect(out.spread.meanDegC).toBe(560);
  });
});

describe('window validity', () => {
  const rand = mulberry32(7);
  const rings: number[][] = [];
  for (let t = 0; t < 60; t++) {
    const level = 540 + 10 * Math.sin(t / 8);
    const r = Array.from({ length: 18 }, () => level + (rand() - 0.5) * 2);
    r[2] = 548.3; // frozen
    r[8] = level + (rand() - 0.5) * 40; // erratic
    r[13] = level + 0.5 * t; // drifting alone
    rings.push(r);
  }
  const v = windowValidity(rings, 18);
  it('finds the frozen, the erratic and the lone drifting thermocouple and nothing else', () => {
    expect(v[2].reason).toBe('frozen');
    expect(v[8].reason).toBe('erratic');
    expect(v[13].reason).toBe('drifting_alone');
    expect(v.filter((x) => x.reason !== 'valid').map((x) => x.thermocouple)).toEqual([3, 9, 14]);
  });
});
