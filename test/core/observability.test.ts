/**
 * A chamber no valid probe sees. Its estimate is not "healthy, near 0": the map has nothing to
 * say of it, so it is not observable (no estimate, a reason), the coverage finding names it,
 * and the uncertainty of a chamber the probes barely see comes from the fit's own conditioning,
 * not from a floor, also with one probe per chamber (no degrees of freedom to spare). Which
 * chambers are blind is worked out here by hand from the geometry (plumeByHandDeg and the von
 * Mises kernel written out), and the rings are made with a plume 0.4 of the pitch wide (the
 * solver assumes 0.5), a fingerprint, and noise.
 */
import { describe, expect, it } from 'vitest';
import { analyseRing, evaluateFindings, NOT_OBSERVABLE, prepareUnit, ringAnalysisToJson, ringFromChambers } from '../../services/core/index.ts';
import { demoCurve, mulberry32, normalSource, plumeByHandDeg, unitConfig } from './helpers.ts';

const N = 12;
const config = unitConfig(N, 1, 4, 0, 1, demoCurve);
const pitch = 360 / N;
const tcAngle = (i: number) => 4 + i * pitch;
/** The solver's kernel written out: von Mises, σ = half a pitch, κ = 1/σ² (radians). */
const response = (deltaDeg: number) => Math.exp((Math.cos((deltaDeg * Math.PI) / 180) - 1) / ((0.5 * pitch * Math.PI) / 180) ** 2);
const fingerprint = Array.from({ length: N }, (_, k) => 6 * Math.sin(1.7 * k + 0.4));

function ring(load: number, missing: number[], z: () => number): (number | null)[] {
  const ctx = prepareUnit(config);
  const kernel = { shape: ctx.kernel.shape, widthDeg: 0.4 * pitch };
  const r: (number | null)[] = Array.from(ringFromChambers(config, fingerprint, load, 560, kernel), (v) => v + 0.8 * z());
  for (const i of missing) r[i] = null;
  return r;
}

describe('a chamber with no valid probe under its plume', () => {
  const ctx = prepareUnit(config);
  const missing = [4, 5, 6]; // thermocouples 5, 6, 7: three adjacent probes failed
  const loads = Array.from({ length: 21 }, (_, j) => 0.55 + j * 0.02);

  it('is not observable (no estimate, a reason) exactly where no valid probe sees 0.1 of its plume, and the coverage finding names it', () => {
    const z = normalSource(mulberry32(21));
    let blindSeen = 0;
    for (const load of loads) {
      const blindByHand: number[] = [];
      for (let k = 0; k < N; k++) {
        const plume = plumeByHandDeg(0, N, k, 1, demoCurve, load);
        let best = 0;
        for (let i = 0; i < N; i++) if (!missing.includes(i)) best = Math.max(best, response(plume - tcAngle(i)));
        if (best < 0.1) blindByHand.push(k + 1);
      }
      blindSeen += blindByHand.length;
      const a = analyseRing(ctx, ring(load, missing, z), load);
      const j = ringAnalysisToJson(a);
      expect(j.chambers.filter((c) => !c.observable).map((c) => c.chamber)).toEqual(blindByHand);
      for (const c of j.chambers) {
        if (c.observable) expect(c.deviationDegC).not.toBeNull();
        else expect([c.deviationDegC, c.uncertaintyDegC, c.notObservableReason]).toEqual([null, null, NOT_OBSERVABLE.noProbeUnderPlume]);
      }
      if (blindByHand.length) {
        expect(blindByHand).not.toContain(a.worstChamber);
        const f = evaluateFindings({ analysis: a, steady: true });
        const cov = f.find((x) => x.kind === 'coverage_degraded');
        expect(cov?.evidence.blindChambers).toBe(blindByHand.join(','));
        expect(cov?.message).toContain(`${blindByHand.join(', ')}`);
      }
    }
    // The failure blinds a chamber at most loads of the curve (the test would pass vacuously otherwise).
    expect(blindSeen).toBeGreaterThan(10);
  });

  it('every chamber is not observable, with the other reason, when too few probes are left for a map', () => {
    const z = normalSource(mulberry32(22));
    const a = analyseRing(ctx, ring(0.9, [0, 1, 2, 3, 4, 5, 6, 7, 8, 9], z), 0.9);
    const j = ringAnalysisToJson(a);
    expect(j.chambers.every((c) => !c.observable && c.notObservableReason === NOT_OBSERVABLE.tooFewProbes)).toBe(true);
  });
});

describe('uncertainty from the fit’s conditioning, one probe per chamber', () => {
  it('a chamber whose only probe failed is as uncertain as its error shows, far more than the chambers whose probe reads', () => {
    const ctx = prepareUnit(config);
    const z = normalSource(mulberry32(23));
    const rand = mulberry32(24);
    const ratios: number[] = [];
    let worstZ = 0;
    for (let r = 0; r < 200; r++) {
      const load = 0.55 + 0.45 * rand();
      // The probe nearest chamber 4's plume at this load fails.
      const plume = plumeByHandDeg(0, N, 3, 1, demoCurve, load);
      let near = 0;
      for (let i = 1; i < N; i++) if (Math.abs(((tcAngle(i) - plume + 540) % 360) - 180) < Math.abs(((tcAngle(near) - plume + 540) % 360) - 180)) near = i;
      const a = analyseRing(ctx, ring(load, [near], z), load);
      // The fit has no spare degrees of freedom here.
      expect(a.fitResidualSdDegC).toBeNaN();
      const mean = fingerprint.reduce((s, v) => s + v, 0) / N;
      const u = a.chamberUncertaintyDegC[3];
      expect(Number.isFinite(a.chamberDeviationDegC[3])).toBe(true);
      worstZ = Math.max(worstZ, Math.abs(a.chamberDeviationDegC[3] - (fingerprint[3] - mean)) / u);
      const others = Array.from(a.chamberUncertaintyDegC).filter((_, k) => Math.abs(k - 3) > 1).sort((x, y) => x - y);
      ratios.push(u / others[Math.floor(others.length / 2)]);
    }
    // Its error against the truth stays within three of its own σ on every ring…
    expect(worstZ).toBeLessThan(3);
    // …and it is told apart from the chambers the probes see: at least three times as uncertain.
    expect(Math.min(...ratios)).toBeGreaterThan(3);
  });
});
