/**
 * The chambers' common mode: one chamber going cold must not lift the others. Simulated rings
 * (services/sim: plumes wider than the solver's kernel, placement asymmetry, probe offsets and
 * class-2 noise), a baseline fitted on a healthy week, then one chamber's nozzle partly plugged.
 */
import { describe, expect, it } from 'vitest';
import { analyseRing, baselineResiduals, baselineSampleFromAnalysis, copyRingAnalysis, correctedLoadFraction, fitUnitBaseline, prepareUnit, type BaselineSample, type RingAnalysis } from '../../services/core/index.ts';
import { DEMO_SITES, HARBOUR_POINT_TYPE } from '../../services/sim/fleet.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import type { SimUnit } from '../../services/sim/types.ts';
import { chamberNextStep } from '../../services/api/review/data.ts';
import type { ChamberRow } from '../../services/api/routes/chambers.ts';
import type { AlertSummary } from '../../services/db/reads.ts';

const unit: SimUnit = {
  config: { id: 'cm-1', name: 'Common mode unit', site: 'Harbour Point', ...HARBOUR_POINT_TYPE, swirl: { sense: 1, curve: [[0.2, 88], [0.6, 70], [1.0, 52]] } },
  climate: DEMO_SITES['Harbour Point'],
  dispatch: { profile: 'base', tripsPerYear: 0 },
  faults: [{ kind: 'nozzle_plugging', chamber: 4, at: '2026-01-09T00:00:00Z', days: 0, depthPct: 9 }],
};

function analysed(from: string, to: string): RingAnalysis[] {
  const ctx = prepareUnit(unit.config);
  const out: RingAnalysis[] = [];
  for (const r of simulateUnit(unit, { from, to, seed: 3, steadyIntervalS: 300 }).rings()) {
    if (Math.abs(r.speedPct - 100) > 1 || r.loadMw <= 0) continue;
    const l = correctedLoadFraction(r.loadMw, r.ambientC, r.ambientKPa, unit.config);
    if (l < 0.5) continue;
    out.push(copyRingAnalysis(analyseRing(ctx, r.exhaustC, l)));
  }
  return out;
}

const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[xs.length >> 1];

describe('one chamber going cold', () => {
  const ctx = prepareUnit(unit.config);
  let cold: number[][] = [];
  it('leaves every other chamber\'s residual within its healthy noise', () => {
    const reference = analysed('2026-01-01T00:00:00Z', '2026-01-08T00:00:00Z');
    const samples: BaselineSample[] = reference.map(baselineSampleFromAnalysis);
    const baseline = fitUnitBaseline(samples, { version: 1, window: { from: '2026-01-01', to: '2026-01-08' }, fittedAt: '2026-01-08', fittedBy: 'test' });
    const perChamber = (rings: RingAnalysis[]) => {
      const cols: number[][] = Array.from({ length: ctx.n }, () => []);
      for (const a of rings) {
        const r = baselineResiduals(ctx, a, baseline).chamberDegC;
        if (r) r.forEach((v, k) => Number.isFinite(v) && cols[k].push(v));
      }
      return cols;
    };
    const healthy = perChamber(analysed('2026-01-08T00:00:00Z', '2026-01-09T00:00:00Z'));
    cold = perChamber(analysed('2026-01-09T01:00:00Z', '2026-01-10T00:00:00Z'));
    // Each chamber's ring-to-ring noise on the healthy day (robust σ, about 0.3 °C here).
    const sigma = (c: number[]) => {
      const m = median(c);
      return 1.4826 * median(c.map((v) => Math.abs(v - m)));
    };
    const depth = median(cold[3]);
    expect(depth).toBeLessThan(-12);
    for (let k = 0; k < ctx.n; k++) {
      if (k === 3) continue;
      const r = median(cold[k]);
      const s = sigma(healthy[k]);
      if (k === 2 || k === 4) {
        // Chambers 3 and 5 lie under the edges of chamber 4's plume, which the simulator spreads
        // wider than the solver's kernel: a little of its cold may show there, never heat.
        expect(r).toBeLessThan(3 * s);
        expect(r).toBeGreaterThan(0.15 * depth);
      } else {
        // Before the common mode was taken by the median, every one of these read about
        // −depth/11 ≈ +1.4 °C (the map's chambers are relative to their average), 4–6 σ.
        expect(Math.abs(r)).toBeLessThan(3 * s);
      }
    }
  });

  it('leaves every other chamber at "no action" in the pre-outage review', () => {
    expect(cold.length).toBe(ctx.n);
    // The review's rows as the chambers route builds them: the residual now, the drift floor's
    // scale (CANSIGHT_DRIFT_SIGMA_FLOOR_C, 1 °C), no significant drift; chamber 4 alarmed.
    const rows = cold.map((c, k) => row(k + 1, median(c)));
    const alerts = [alert('chamber_cold', 'alarm', 4)];
    rows.forEach((r) => {
      const step = chamberNextStep(r, alerts);
      if (r.chamber === 4) expect(step).toMatch(/^Borescope chamber 4/);
      else expect(step).toBe('No action indicated by the exhaust ring.');
    });
  });
});

function row(chamber: number, residualC: number | null, drift: { per30: number; significant: boolean } | null = null): ChamberRow {
  return {
    chamber, angleDeg: 0, plumeAngleDeg: null, deviationC: null, uncertaintyC: null, observable: true, notObservableReason: null, residualC,
    driftCPer30d: drift?.per30 ?? null, driftIntervalCPer30d: null, driftCPer1000h: null, driftSignificant: drift?.significant ?? false, driftDays: 30,
    cusum: null, sigmaC: 1, baselineVersion: 1, activeGrade: null, likelihoodWorst: null,
  };
}

function alert(kind: string, grade: AlertSummary['grade'], chamber: number): AlertSummary {
  return {
    id: 'a', kind, grade, chamber, thermocouple: null, active: true, acknowledged: false, shelvedUntil: null, raisedAt: '2026-01-09T02:00:00Z', clearedAt: null,
    message: '', advice: '', evidence: {}, likelihood: null, runnerUpChamber: null, runnerUpLikelihood: null, baselineVersion: 1,
  } as AlertSummary;
}

describe('the pre-outage review\'s next step for a chamber', () => {
  it('advises an inspection only on a finding or on evidence at the warning levels', () => {
    const none = 'No action indicated by the exhaust ring.';
    // +4 °C is four of its daily scales but a third of the 12 °C hot warning: no action (the
    // evidence score alone used to send it to "erosion and over-fuelling").
    expect(chamberNextStep(row(2, 4), [])).toBe(none);
    expect(chamberNextStep(row(2, -11.9), [])).toBe(none);
    expect(chamberNextStep(row(2, 0.5, { per30: -4.9, significant: true }), [])).toBe(none);
    expect(chamberNextStep(row(2, 0.5, { per30: -8, significant: false }), [])).toBe(none);
    expect(chamberNextStep(row(2, 1), [alert('chamber_drift', 'notice', 2)])).toBe(none);
    expect(chamberNextStep(row(2, 1), [alert('chamber_cold', 'alarm', 3)])).toBe(none);
    expect(chamberNextStep(row(2, -12), [])).toMatch(/^Borescope chamber 2/);
    expect(chamberNextStep(row(2, 12.5), [])).toMatch(/^Inspect chamber 2 fuel nozzle tip/);
    expect(chamberNextStep(row(2, 0.5, { per30: -5, significant: true }), [])).toMatch(/^Borescope chamber 2/);
    expect(chamberNextStep(row(2, 1), [alert('chamber_hot', 'warning', 2)])).toMatch(/^Inspect chamber 2 fuel nozzle tip/);
    expect(chamberNextStep(row(2, 1), [alert('chamber_drift', 'warning', 2)])).toMatch(/^Inspect chamber 2/);
  });
});
