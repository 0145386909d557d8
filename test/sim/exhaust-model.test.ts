/**
 * The ring mean's response to ambient and load: the constants in services/sim/exhaust-model.ts
 * are re-derived from the UCI gas turbine data set (Kaya, Tüfekci, Uzun 2019, CC BY 4.0;
 * test/reference/uci-gas-turbine-co-nox-2011-2015.csv), the regression is checked against the
 * NIST StRD "Norris" certified values, and simulated rings are checked to follow the fitted
 * sensitivities.
 */
import { describe, expect, it } from 'vitest';
import {
  baseLoadFraction, fitUciExhaustResponse, leastSquares, parseUciCsv, ringMeanC, UCI_EXHAUST_FIT,
} from '../../services/sim/exhaust-model.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { DEMO_SITES } from '../../services/sim/fleet.ts';
import type { SimUnit } from '../../services/sim/types.ts';
import { referenceText } from '../helpers/reference.ts';

describe('least squares used for the UCI fit', () => {
  it('reproduces NIST StRD Norris certified coefficients (B0 = −0.262323073774029, B1 = 1.00211681802045)', () => {
    const rows = referenceText('norris.csv').trim().split(/\r?\n/).slice(1).map((l) => l.split(',').map(Number));
    const beta = leastSquares(rows.map(([, x]) => [1, x]), rows.map(([y]) => y));
    expect(beta[0]).toBeCloseTo(-0.262323073774029, 9);
    expect(beta[1]).toBeCloseTo(1.00211681802045, 11);
  });
});

describe('UCI-derived exhaust coefficients', () => {
  const fit = fitUciExhaustResponse(parseUciCsv(referenceText('uci-gas-turbine-co-nox-2011-2015.csv')));

  it('the constants in the code agree with a fresh fit on the UCI CSV (Kaya et al. 2019)', () => {
    for (const [key, value] of Object.entries(UCI_EXHAUST_FIT)) {
      const fresh = fit[key as keyof typeof fit];
      // Constants are stored to four or five significant figures.
      expect(Math.abs(value - fresh), key).toBeLessThanOrEqual(6e-4 * Math.abs(fresh) + 1e-6);
    }
  });

  it('the data show exhaust temperature control: TAT nearly flat near 550 °C on the plateau, falling towards base load', () => {
    expect(fit.partTatC).toBeGreaterThan(545);
    expect(fit.partTatC).toBeLessThan(553);
    expect(Math.abs(fit.partTatPerLoad)).toBeLessThan(30); // flat: under 3 °C per 10 % load
    expect(fit.transitionTatPerLoad).toBeLessThan(-50); // leaves the plateau steeply
    expect(fit.baseTatC).toBeLessThan(fit.partTatC);
    expect(fit.baseTatPerC).toBeGreaterThan(0.3); // warmer day, hotter exhaust at base
    expect(fit.basePowerPerC).toBeLessThan(0); // warmer day, less power
  });
});

function testUnit(profile: 'base' | 'cycling'): SimUnit {
  return {
    config: {
      id: `uci-check-${profile}`, name: 'UCI check', site: 'Kestrel Fen', ratedPowerMw: 50,
      thermocouples: { count: 18, firstAngleDeg: 10 }, chambers: { count: 10, firstAngleDeg: 0 },
      swirl: { sense: 1, curve: [[0.2, 80], [1, 50]] }, temperatureUnit: 'C',
    },
    climate: DEMO_SITES['Kestrel Fen'],
    dispatch: { profile, tripsPerYear: 0 },
  };
}

/** Ordinary least squares of ring mean on the given regressors over steady, running rings. */
function ringRegression(unit: SimUnit, days: number, select: (load: number, ambC: number, ambKPa: number) => number[] | null) {
  const sim = simulateUnit(unit, { from: '2025-10-01T00:00:00Z', to: new Date(Date.parse('2025-10-01T00:00:00Z') + days * 86_400_000), seed: 3, steadyIntervalS: 600 });
  const b = sim.batch();
  const X: number[][] = [], y: number[] = [];
  for (let r = 0; r < b.count; r++) {
    if (b.speedPct[r] < 99) continue;
    const load = b.loadMw[r] / unit.config.ratedPowerMw;
    const row = select(load, b.ambientC[r], b.ambientKPa[r]);
    if (!row) continue;
    let s = 0;
    for (let i = 0; i < b.thermocoupleCount; i++) s += b.exhaustC[r * b.thermocoupleCount + i];
    X.push(row);
    y.push(s / b.thermocoupleCount);
  }
  return { beta: leastSquares(X, y), n: y.length };
}

describe('simulated ring mean follows load and ambient like the UCI unit', () => {
  it('at base load: d(ring mean)/d(ambient) ≈ UCI base-load slope, and base power falls with ambient as UCI', () => {
    const unit = testUnit('base');
    const { beta, n } = ringRegression(unit, 120, (load, a, p) => (load > baseLoadFraction(a, p) - 0.01 ? [1, a - 15, p * 10 - 1013.25] : null));
    expect(n).toBeGreaterThan(1000);
    expect(beta[1]).toBeGreaterThan(UCI_EXHAUST_FIT.baseTatPerC - 0.08);
    expect(beta[1]).toBeLessThan(UCI_EXHAUST_FIT.baseTatPerC + 0.08);
    // Base power from the rings.
    const sim = simulateUnit(unit, { from: '2025-10-01T00:00:00Z', to: '2025-12-01T00:00:00Z', seed: 3, steadyIntervalS: 3600 });
    const b = sim.batch();
    const X: number[][] = [], y: number[] = [];
    for (let r = 0; r < b.count; r++) if (b.speedPct[r] > 99) { X.push([1, b.ambientC[r] - 15, b.ambientKPa[r] * 10 - 1013.25]); y.push(b.loadMw[r] / unit.config.ratedPowerMw); }
    const pb = leastSquares(X, y);
    expect(pb[1]).toBeCloseTo(UCI_EXHAUST_FIT.basePowerPerC, 3);
  });

  it('on the part-load plateau: slopes against load and ambient ≈ UCI part-load fit', () => {
    const unit = testUnit('cycling');
    const { beta, n } = ringRegression(unit, 120, (load, a) => (load > 0.66 && load < 0.8 ? [1, load - 0.8, a - 15] : null));
    expect(n).toBeGreaterThan(300);
    expect(beta[1]).toBeGreaterThan(UCI_EXHAUST_FIT.partTatPerLoad - 6);
    expect(beta[1]).toBeLessThan(UCI_EXHAUST_FIT.partTatPerLoad + 6);
    expect(beta[2]).toBeGreaterThan(UCI_EXHAUST_FIT.partTatPerC - 0.08);
    expect(beta[2]).toBeLessThan(UCI_EXHAUST_FIT.partTatPerC + 0.08);
  });

  it('between plateau and base load the model falls at the UCI transition slope at fixed ambient', () => {
    const lb = baseLoadFraction(15, 101.325);
    const slope = (ringMeanC(lb - 0.02, 15, 101.325) - ringMeanC(lb - 0.06, 15, 101.325)) / 0.04;
    expect(slope).toBeCloseTo(UCI_EXHAUST_FIT.transitionTatPerLoad, 6);
  });
});
