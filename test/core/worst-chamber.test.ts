/**
 * The worst-chamber verdict: calibrated on simulated rings (services/sim: plumes wider than the
 * solver's kernel, placement asymmetry, probe offsets, class-2 noise) whose chambers depart from
 * their normal by small known amounts, a chamber named at likelihood p must be the one that
 * really departs most about p of the time (a reliability table); a ring with no departure at
 * all names none with a high likelihood; the probabilities worked by hand on small cases.
 */
import { describe, expect, it } from 'vitest';
import {
  analyseRing, baselineResiduals, baselineSampleFromAnalysis, chamberScatterInto, copyRingAnalysis, correctedLoadFraction, fitUnitBaseline,
  prepareUnit, worstChamberProbabilities, worstChamberVerdict, NO_WORST_CHAMBER, type RingAnalysis, type UnitBaseline,
} from '../../services/core/index.ts';
import { DEMO_SITES, HARBOUR_POINT_TYPE } from '../../services/sim/fleet.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import type { SimUnit } from '../../services/sim/types.ts';
import { mulberry32, normalSource } from './helpers.ts';

const N = HARBOUR_POINT_TYPE.chambers.count;

function unitWith(fingerprintPct: number[]): SimUnit {
  return {
    config: { id: 'worst-1', name: 'Worst chamber unit', site: 'Harbour Point', ...HARBOUR_POINT_TYPE, swirl: { sense: 1, curve: [[0.2, 88], [0.6, 70], [1.0, 52]] } },
    climate: DEMO_SITES['Harbour Point'],
    physics: { fingerprintPct },
    dispatch: { profile: 'base', tripsPerYear: 0 },
  };
}

function analysed(unit: SimUnit, from: string, to: string, everyS: number): RingAnalysis[] {
  const ctx = prepareUnit(unit.config);
  const out: RingAnalysis[] = [];
  for (const r of simulateUnit(unit, { from, to, seed: 5, steadyIntervalS: everyS }).rings()) {
    if (Math.abs(r.speedPct - 100) > 1 || r.loadMw <= 0) continue;
    const l = correctedLoadFraction(r.loadMw, r.ambientC, r.ambientKPa, unit.config);
    if (l >= 0.5) out.push(copyRingAnalysis(analyseRing(ctx, r.exhaustC, l)));
  }
  return out;
}

const normal = normalSource(mulberry32(41));
const FINGERPRINT = Array.from({ length: N }, () => 3 * normal());

/** The unit's baseline, fitted on a healthy week with its own fingerprint. */
function healthyBaseline(): UnitBaseline {
  const rings = analysed(unitWith(FINGERPRINT), '2026-01-01T00:00:00Z', '2026-01-08T00:00:00Z', 300);
  return fitUnitBaseline(rings.map(baselineSampleFromAnalysis), { version: 1, window: { from: '2026-01-01', to: '2026-01-08' }, fittedAt: '2026-01-08', fittedBy: 'test' });
}

/** Verdicts of rings of a unit whose fingerprint is `pct`, judged against `baseline`. */
function verdicts(baseline: UnitBaseline, pct: number[], day: number) {
  const unit = unitWith(pct);
  const ctx = prepareUnit(unit.config);
  const probs = new Float64Array(N);
  const cdf = new Float64Array(N);
  const scatter = new Float64Array(N);
  const d = String(day).padStart(2, '0');
  return analysed(unit, `2026-01-${d}T09:00:00Z`, `2026-01-${d}T13:00:00Z`, 1200).map((a) => {
    const res = baselineResiduals(ctx, a, baseline);
    const has = chamberScatterInto(baseline, a.loadFraction, N, res.chamberUncertaintyDegC, scatter) > 0;
    return worstChamberVerdict({ atLoad: true, hasBaseline: has, residualDegC: res.chamberDegC, scatterDegC: scatter, n: N }, probs, cdf);
  });
}

/** The chamber whose heat share really departs most from its normal (the simulator's truth), from 1. */
function trueWorst(before: number[], after: number[]): number {
  const share = (pct: number[]) => {
    const h = pct.map((p) => 1 + p / 100);
    const mean = h.reduce((a, b) => a + b, 0) / h.length;
    return h.map((x) => x / mean);
  };
  const b = share(before);
  const dep = share(after).map((x, k) => x - b[k]);
  const med = [...dep].sort((x, y) => x - y)[dep.length >> 1];
  let worst = 0;
  dep.forEach((v, k) => {
    if (Math.abs(v - med) > Math.abs(dep[worst] - med)) worst = k;
  });
  return worst + 1;
}

describe('the worst-chamber probabilities (worked by hand)', () => {
  it('put one far-out chamber at certainty, three alike at a third each, and ignore a chamber without a residual', () => {
    const p = new Float64Array(3);
    const c = new Float64Array(3);
    worstChamberProbabilities([-20, 0, 0], [1, 1, 1], 3, p, c);
    expect(p[0]).toBeCloseTo(1, 6);
    worstChamberProbabilities([0, 0, 0], [1, 1, 1], 3, p, c);
    for (const v of p) expect(v).toBeCloseTo(1 / 3, 3);
    // Two chambers 1 σ apart, the third out of the running: P(|T₁| > |T₂|) for T₁ ~ N(1, 1),
    // T₂ ~ N(0, 1). Monte Carlo outside the project (Python random.gauss, seed 1, 10⁶ pairs):
    // 0.6357.
    expect(worstChamberProbabilities([1, 0, Number.NaN], [1, 1, 1], 3, p, c)).toBe(2);
    expect(p[0]).toBeCloseTo(0.636, 2);
    expect(p[2]).toBe(0);
  });

  it('gives no verdict, with the reason, off steady load, without a baseline or without a map, and names the finding\'s chamber', () => {
    const p = new Float64Array(3);
    const c = new Float64Array(3);
    const base = { residualDegC: [5, 0, 0.1], scatterDegC: [1, 1, 1], n: 3 };
    expect(worstChamberVerdict({ ...base, atLoad: false, hasBaseline: true }, p, c)).toMatchObject({ chamber: null, likelihood: null, reason: NO_WORST_CHAMBER.notAtLoad });
    expect(worstChamberVerdict({ ...base, atLoad: true, hasBaseline: false }, p, c)).toMatchObject({ chamber: null, reason: NO_WORST_CHAMBER.noBaseline });
    expect(worstChamberVerdict({ ...base, atLoad: true, hasBaseline: true, residualDegC: null }, p, c)).toMatchObject({ chamber: null, reason: NO_WORST_CHAMBER.noMap });
    expect(worstChamberVerdict({ ...base, atLoad: true, hasBaseline: true }, p, c)).toMatchObject({ chamber: 1, runnerUpChamber: 3, reason: null });
    const withFinding = worstChamberVerdict({ ...base, atLoad: true, hasBaseline: true, findings: [{ chamber: 2, gradeRank: 1, magnitudeDegC: 0 }] }, p, c);
    expect(withFinding.chamber).toBe(2);
    expect(withFinding.runnerUpChamber).toBe(1);
  });
});

describe('the worst-chamber verdict on simulated rings', () => {
  const baseline = healthyBaseline();

  it('names no chamber with a high likelihood on a ring whose chambers are all at their normal', () => {
    const all = [8, 9, 10, 11].flatMap((day) => verdicts(baseline, FINGERPRINT, day));
    expect(all.length).toBeGreaterThan(30);
    const lik = all.map((v) => v.likelihood as number).sort((a, b) => a - b);
    console.log(`healthy rings: ${lik.length}, likelihood of the chamber named: median ${lik[lik.length >> 1].toFixed(3)}, max ${lik[lik.length - 1].toFixed(3)}`);
    expect(lik[lik.length >> 1]).toBeLessThan(0.3);
    expect(lik[lik.length - 1]).toBeLessThan(0.5);
  });

  it('is calibrated: a chamber named at likelihood p is the one departing most about p of the time', () => {
    // Healthy chambers wandering from their normal: every chamber's fuel share moved by a draw
    // of σ 0.6 % (about 1 °C at the exhaust, well below the 12 °C warning), a new draw per trial.
    const draw = normalSource(mulberry32(97));
    const bins = Array.from({ length: 5 }, () => ({ n: 0, sumP: 0, hits: 0 }));
    for (let trial = 0; trial < 120; trial++) {
      const moved = FINGERPRINT.map((f) => f + 0.6 * draw());
      const truth = trueWorst(FINGERPRINT, moved);
      for (const v of verdicts(baseline, moved, 8 + (trial % 20))) {
        const p = v.likelihood as number;
        const b = bins[Math.min(4, Math.floor(p * 5))];
        b.n++;
        b.sumP += p;
        if (v.chamber === truth) b.hits++;
      }
    }
    console.log('reliability of the worst-chamber likelihood (simulated healthy rings):');
    console.log('  likelihood   rings   mean p   right');
    bins.forEach((b, i) => console.log(`  ${(i / 5).toFixed(1)}–${((i + 1) / 5).toFixed(1)}   ${String(b.n).padStart(5)}   ${b.n ? (b.sumP / b.n).toFixed(3) : '  –  '}   ${b.n ? (b.hits / b.n).toFixed(3) : '  –'}`));
    // Measured (seeds 41 and 97): named at 0.18, 0.30, 0.48, 0.68 → right 0.25, 0.50, 0.71, 0.93 of
    // the time. The likelihood errs on the modest side: the map's uncertainty is floored at a
    // residual of 1 °C (ring.ts residualFloorDegC) where these rings leave about 0.35 °C. It must
    // never claim more than it knows (right at least p of the time, less twice the bin's
    // binomial standard error), nor fall more than 0.3 short of it.
    for (const b of bins) {
      if (b.n < 40) continue;
      const p = b.sumP / b.n;
      const se = Math.sqrt((p * (1 - p)) / b.n);
      expect(b.hits / b.n).toBeGreaterThan(p - 2 * se);
      expect(b.hits / b.n - p).toBeLessThan(0.3);
    }
  });
});
