/**
 * A lone probe departing from its normal while its neighbours hold is that sensor, and a
 * chamber's plume is that chamber, whatever the true plume width (0.3–0.6 of the chamber
 * pitch, the solver assumes 0.5) and whether the probe sits at a plume's centre or between two
 * plumes. The rings are made through a kernel of the true width (the unit's own normal is
 * fitted on such rings, as a real unit's baseline is), with a fingerprint of a few degrees and
 * noise; where plumes land is worked out by hand (plumeByHandDeg). On the same ring, a chamber
 * on the far side goes cold: a larger departure elsewhere must not hide the lone probe, and the
 * crest of a narrow real plume must not pass for a sensor.
 */
import { describe, expect, it } from 'vitest';
import {
  analyseRing,
  baselineResiduals,
  baselineSampleFromAnalysis,
  evaluateFindings,
  fitUnitBaseline,
  prepareUnit,
  ringFromChambers,
  type BaselineSample,
  type Finding,
} from '../../services/core/index.ts';
import { demoCurve, mulberry32, normalSource, plumeByHandDeg, unitConfig } from './helpers.ts';

// Ten chambers, two probes each; at 90 % load the swirl on demoCurve is 74 + 0.75·(55 − 74) =
// 59.75°, so with the first probe at 59.75° every odd-numbered probe (1, 3, …) sits on a
// plume's centre and every even-numbered one halfway between two plumes.
const LOAD = 0.9;
const config = unitConfig(10, 2, 59.75, 0, 1, demoCurve);
const fingerprint = Array.from({ length: 10 }, (_, k) => 4 * Math.sin(1.7 * k + 0.4));

function rings(width: number, load: number, z: () => number, chambers = fingerprint): Float64Array {
  const ctx = prepareUnit(config);
  const kernel = { shape: ctx.kernel.shape, widthDeg: width * ctx.chamberPitchDeg };
  const r = ringFromChambers(config, chambers, load, 520 + 60 * load, kernel);
  for (let i = 0; i < r.length; i++) r[i] += 0.35 * z();
  return r;
}

function setup(width: number) {
  const ctx = prepareUnit(config);
  const rand = mulberry32(31);
  const z = normalSource(rand);
  const samples: BaselineSample[] = [];
  for (let j = 0; j < 2000; j++) {
    const load = 0.8 + 0.2 * rand();
    samples.push(baselineSampleFromAnalysis(analyseRing(ctx, rings(width, load, z), load)));
  }
  const baseline = fitUnitBaseline(samples, { version: 1, window: { from: '2026-01-01T00:00:00Z', to: '2026-01-15T00:00:00Z' }, fittedAt: '2026-01-16T00:00:00Z', fittedBy: 'test' });
  const findings = (ring: ArrayLike<number>): Finding[] => {
    const a = analyseRing(ctx, ring, LOAD);
    const residuals = baselineResiduals(ctx, a, baseline);
    return evaluateFindings({ analysis: a, steady: true, baseline, residuals });
  };
  return { findings, z };
}

describe('the geometry of the test', () => {
  it('puts probe 7 on chamber 4’s plume centre and probe 8 between chambers 4 and 5 at 90 % load', () => {
    expect(plumeByHandDeg(0, 10, 3, 1, demoCurve, LOAD)).toBeCloseTo(59.75 + 6 * 18, 9);
    expect(plumeByHandDeg(0, 10, 4, 1, demoCurve, LOAD) - plumeByHandDeg(0, 10, 3, 1, demoCurve, LOAD)).toBeCloseTo(2 * 18, 9);
  });
});

describe.each([0.3, 0.4, 0.5, 0.6])('true plume width %s of the pitch', (width) => {
  const { findings, z } = setup(width);
  it.each([
    ['at a plume centre', 7],
    ['between two plumes', 8],
  ])('a probe %s reading 14 °C below its normal, neighbours holding, is that sensor; chamber 9 going cold on the far side is that chamber', (_where, probe) => {
    let seen = 0;
    for (let j = 0; j < 20; j++) {
      const chambers = fingerprint.slice();
      chambers[8] -= 25;
      const ring = rings(width, LOAD, z, chambers);
      ring[probe - 1] -= 14;
      const f = findings(ring);
      const tc = f.filter((x) => x.kind === 'thermocouple_fault');
      expect(tc.map((x) => [x.thermocouple, x.evidence.reason])).toEqual([[probe, 'drifting_alone']]);
      const cold = f.filter((x) => x.kind === 'chamber_cold').map((x) => x.chamber);
      expect(cold).toContain(9);
      // Nothing is blamed on the chambers over the lone probe.
      expect(f.filter((x) => (x.kind === 'chamber_cold' || x.kind === 'chamber_hot') && x.chamber !== null && x.chamber >= 3 && x.chamber <= 6)).toEqual([]);
      seen++;
    }
    expect(seen).toBe(20);
  });
});
