/**
 * A sensor or a chamber: a failing thermocouple's error stays on that thermocouple, while mixing
 * spreads every chamber's plume onto the thermocouples beside its peak (common practice in
 * reading exhaust spreads; no published source). These tests hold the findings to that: one
 * thermocouple apart from its normal is named as the sensor, a real plume of any width the
 * plume kernel allows is named as its chamber, at every load of the swirl curve; and leaving a
 * thermocouple out of the map moves no healthy chamber's residual.
 */
import { describe, expect, it } from 'vitest';
import {
  analyseRing,
  baselineResiduals,
  chamberResidualsFromThermocouples,
  plumeResponseAt,
  baselineSampleFromAnalysis,
  evaluateFindings,
  fitUnitBaseline,
  loneThermocouple,
  prepareUnit,
  ringFromChambers,
  windowValidity,
  type BaselineSample,
  type Finding,
  type UnitConfig,
} from '../../services/core/index.ts';
import { demoCurve, mulberry32, unitConfig } from './helpers.ts';

/** A fixed chamber-to-chamber fingerprint of a few degrees, as a healthy unit has. */
const fingerprint = (n: number) => Array.from({ length: n }, (_, k) => 6 * Math.sin(1.7 * k + 0.4));

function healthyRing(config: UnitConfig, load: number, rand: () => number, widthFraction = 0.5, chambers?: number[]): Float64Array {
  const ctx = prepareUnit(config);
  const kernel = { shape: ctx.kernel.shape, widthDeg: widthFraction * ctx.chamberPitchDeg };
  const dev = chambers ?? fingerprint(config.chambers.count);
  const ring = ringFromChambers(config, dev, load, 520 + 60 * load, kernel);
  for (let i = 0; i < ring.length; i++) ring[i] += 2 * Math.cos(i) + (rand() - 0.5) * 0.7;
  return ring;
}

function setup(config: UnitConfig) {
  const ctx = prepareUnit(config);
  const rand = mulberry32(11);
  const samples: BaselineSample[] = [];
  for (let j = 0; j < 3000; j++) {
    const load = 0.5 + 0.5 * rand();
    samples.push(baselineSampleFromAnalysis(analyseRing(ctx, healthyRing(config, load, rand), load)));
  }
  const baseline = fitUnitBaseline(samples, { version: 1, window: { from: '2026-01-01T00:00:00Z', to: '2026-01-15T00:00:00Z' }, fittedAt: '2026-01-16T00:00:00Z', fittedBy: 'test' });
  const findings = (ring: ArrayLike<number | null>, load: number): Finding[] => {
    const a = analyseRing(ctx, ring, load);
    const residuals = baselineResiduals(ctx, a, baseline);
    return evaluateFindings({ analysis: a, steady: true, baseline, residuals, plumeShare: { left: ctx.responseLeft, right: ctx.responseRight } });
  };
  return { ctx, baseline, findings, rand };
}

describe('loneThermocouple', () => {
  const share = new Float64Array(8).fill(0.14);
  it('names a reading that departs while both neighbours hold', () => {
    expect(loneThermocouple([0.3, -0.2, 0.1, -25, 0.4, 0, 0.2, -0.1], 8, share, share, 5)).toEqual({ index: 3, value: -25 });
  });
  it('gives no verdict when a neighbour moved with it, is unknown, or nothing is large enough', () => {
    expect(loneThermocouple([0, 0, -4, -25, 0, 0, 0, 0], 8, share, share, 5)).toBeNull();
    expect(loneThermocouple([0, 0, NaN, -25, 0, 0, 0, 0], 8, share, share, 5)).toBeNull();
    expect(loneThermocouple([0, 0, 0, -4, 0, 0, 0, 0], 8, share, share, 5)).toBeNull();
  });
  it('a neighbour moving the other way does not make it a plume', () => {
    expect(loneThermocouple([0, 0, 3, -25, 0, 0, 0, 0], 8, share, share, 5)?.index).toBe(3);
  });
});

describe.each([
  ['one thermocouple per chamber', unitConfig(12, 1, 4, 0, 1, demoCurve)],
  ['two thermocouples per chamber', unitConfig(10, 2, 3, 0, -1, demoCurve)],
])('findings on a unit with %s', (_name, config) => {
  const { ctx, baseline, findings, rand } = setup(config);
  const loads = Array.from({ length: 21 }, (_, j) => 0.55 + j * 0.02);

  it('a healthy ring with one thermocouple left out moves no chamber residual', () => {
    for (const load of loads) {
      const ring: (number | null)[] = Array.from(healthyRing(config, load, rand));
      ring[5] = null;
      const a = analyseRing(ctx, ring, load);
      const r = baselineResiduals(ctx, a, baseline).chamberDegC!;
      for (const v of r) expect(Math.abs(v)).toBeLessThan(2);
      expect(findings(ring, load)).toEqual([]);
    }
  });

  it('one thermocouple reading 30 °C low is that sensor, at every load, and blames no chamber', () => {
    for (const load of loads) {
      const ring = healthyRing(config, load, rand);
      ring[6] -= 30;
      const f = findings(ring, load);
      expect(f.some((x) => x.kind === 'chamber_cold' || x.kind === 'chamber_hot')).toBe(false);
      const tc = f.find((x) => x.kind === 'thermocouple_fault' && x.evidence.reason === 'drifting_alone');
      expect(tc?.thermocouple).toBe(7);
    }
  });

  it('one thermocouple reading 40 °C high makes the spread high because of that sensor, not a chamber', () => {
    for (const load of loads) {
      const ring = healthyRing(config, load, rand);
      ring[6] += 40;
      const f = findings(ring, load);
      // Where the ring's own outlier test already set the reading aside there is no high spread at all.
      const spread = f.find((x) => x.kind === 'spread_high');
      if (spread) expect([spread.thermocouple, spread.chamber, spread.grade]).toEqual([7, null, 'notice']);
      expect(f.filter((x) => x.kind === 'thermocouple_fault').map((x) => x.thermocouple)).toEqual([7]);
      expect(f.some((x) => x.kind === 'chamber_cold' || x.kind === 'chamber_hot')).toBe(false);
    }
  });

  it.each([0.5, 0.6, 0.7])('a chamber 45 °C cold with plume width %s of the pitch is that chamber, at every load', (width) => {
    for (const load of loads) {
      const dev = fingerprint(config.chambers.count);
      dev[3] -= 45;
      const ring = healthyRing(config, load, rand, width, dev);
      const f = findings(ring, load);
      const cold = f.filter((x) => x.kind === 'chamber_cold');
      expect(cold.map((x) => x.chamber)).toEqual([4]);
      expect(f.some((x) => x.kind === 'thermocouple_fault')).toBe(false);
    }
  });
});

describe('drift: a sensor or a chamber', () => {
  const config = unitConfig(10, 2, 3, 0, 1, demoCurve);
  const ctx = prepareUnit(config);
  const a = analyseRing(ctx, healthyRing(config, 0.9, mulberry32(5)), 0.9);
  const share = { left: ctx.responseLeft, right: ctx.responseRight, response: plumeResponseAt(ctx, 0.9), coverResponse: ctx.options.plumeCoverResponse };
  const rate = (per30: number, significant = true) => ({
    rate: { per30DaysDegC: per30, per30DaysInterval: [per30 - 2, per30 + 2] as [number, number], per1000FiredHoursDegC: null, per1000FiredHoursInterval: null, confidence: 0.95, n: 10, significant },
  });
  it('a thermocouple drifting alone is named, and the chamber drift it makes is not raised', () => {
    // At 90 % load (swirl 59.75° on demoCurve) chamber 4's plume centre is at 3·36 + 59.75 = 167.75°,
    // 20.75° from thermocouple 9 (3 + 8·18 = 147°): its plume covers the probe.
    const thermocouples = Array.from({ length: 20 }, (_, i) => rate(i === 8 ? -30 : 0.4 * Math.sin(i), i === 8));
    const chambers = Array.from({ length: 10 }, (_, k) => rate(k === 3 ? -14 : 0.5, k === 3));
    const f = evaluateFindings({ analysis: a, steady: true, plumeShare: share, drift: { chambers, thermocouples } });
    expect(f.filter((x) => x.kind === 'chamber_drift')).toEqual([]);
    const tc = f.find((x) => x.kind === 'thermocouple_fault');
    expect(tc?.thermocouple).toBe(9);
    expect(tc?.evidence.reason).toBe('drifting_alone');
    expect(tc?.evidence.chamberDriftExplained).toBe('4');
  });

  it.each([0.3, 0.4, 0.5, 0.6])('a probe drifting alone on one side and a chamber plugging on the other are both raised (true plume width %s of the pitch)', (width) => {
    // Drift rates map through the chamber map like residuals do (the map is linear): the
    // thermocouples' rates are thermocouple 9 drifting −30 °C per 30 days by itself plus
    // chamber 9's plume (the far side of the ring) cooling at −20 °C per 30 days, seen through a
    // plume of the true width, and the chambers' rates are what the solver makes of them.
    const load = 0.9;
    const kernel = { shape: ctx.kernel.shape, widthDeg: width * ctx.chamberPitchDeg };
    const cooling = new Array(10).fill(0);
    cooling[8] = -20;
    const tcRates = Array.from(ringFromChambers(config, cooling, load, 0, kernel));
    tcRates[8] += -30;
    const chamberRates = chamberResidualsFromThermocouples(ctx, load, tcRates)!.chamberDeviationDegC;
    const thermocouples = tcRates.map((v) => rate(v, Math.abs(v) > 2));
    const chambers = Array.from(chamberRates, (v) => rate(v, Math.abs(v) > 2));
    const f = evaluateFindings({ analysis: a, steady: true, plumeShare: share, drift: { chambers, thermocouples } });
    const drift = f.filter((x) => x.kind === 'chamber_drift');
    expect(drift.map((x) => x.chamber)).toContain(9);
    const tc = f.filter((x) => x.kind === 'thermocouple_fault');
    expect(tc.map((x) => [x.thermocouple, x.evidence.reason])).toEqual([[9, 'drifting_alone']]);
    // Whatever the map puts on the chambers over thermocouple 9 is the probe's, named in its evidence.
    for (const d of drift) expect([3, 4]).not.toContain(d.chamber);
  });
  it('a chamber drifting with its plume on several thermocouples is that chamber, reported once', () => {
    const thermocouples = Array.from({ length: 20 }, (_, i) => rate(i === 8 ? -30 : i === 7 || i === 9 ? -22 : 0.3, i >= 7 && i <= 9));
    const chambers = Array.from({ length: 10 }, (_, k) => rate(k === 4 ? -25 : k === 5 ? -8 : 0.5, k === 4 || k === 5));
    const f = evaluateFindings({ analysis: a, steady: true, plumeShare: share, drift: { chambers, thermocouples } });
    expect(f.filter((x) => x.kind === 'chamber_drift').map((x) => [x.chamber, x.grade])).toEqual([[5, 'alarm']]);
    expect(f.some((x) => x.kind === 'thermocouple_fault')).toBe(false);
  });
});

describe('frozen reading at steady load', () => {
  it('is found when the neighbours move by noise while the ring mean holds', () => {
    const rand = mulberry32(9);
    const rings = Array.from({ length: 30 }, () => Array.from({ length: 12 }, (_, i) => (i === 4 ? 600.2 : 600 + (rand() - 0.5) * 1.4)));
    const v = windowValidity(rings, 12);
    expect(v.filter((x) => x.reason !== 'valid').map((x) => [x.thermocouple, x.reason])).toEqual([[5, 'frozen']]);
  });
  it('is not found on a ring reported to the degree, where a steady reading may hold by chance', () => {
    const rings = Array.from({ length: 30 }, () => Array.from({ length: 12 }, () => 600));
    expect(windowValidity(rings, 12).filter((x) => x.reason !== 'valid')).toEqual([]);
  });
});
