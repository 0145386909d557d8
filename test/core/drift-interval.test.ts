/**
 * The drift rate's interval when days are alike. Daily residuals wander (weather, washes, the
 * season), so neighbouring days are correlated and the ordinary least-squares interval on the
 * slope is too narrow: a healthy chamber's wander then reads as a significant drift. The rate's
 * interval uses the Newey–West (1987) standard error instead. Checked two ways against
 * something outside the code: the estimator worked by hand for a small series (the formula of
 * Newey and West, Econometrica 55 (1987), with Bartlett weights), and the coverage of a nominal
 * 95 % interval on simulated AR(1) series with a known slope.
 */
import { describe, expect, it } from 'vitest';
import { driftRate, SECONDS_PER_DAY } from '../../services/core/drift.ts';
import { linearRegression, slopeConfidenceInterval, slopeNeweyWestSe } from '../../services/core/regression.ts';
import { mulberry32, normalSource } from './helpers.ts';

describe('Newey–West standard error of a slope', () => {
  it('matches the formula worked by hand for six points with one lag', () => {
    // x = 0…5, y = x + 1 + e with e = [0, 1, −1, −1, 1, 0] (Σe = 0, Σe·x = 0, so the OLS line is
    // y = x + 1 and e are its residuals). By hand: x̄ = 2.5, Sxx = 17.5;
    // scores u = (x − x̄)·e = [0, −1.5, 0.5, −0.5, 1.5, 0]; Σu² = 5;
    // lag-1 sum Σ uₜuₜ₋₁ = 0 − 0.75 − 0.25 − 0.75 + 0 = −1.75; Bartlett weight 1 − 1/2 = 0.5;
    // S = 5 + 2·0.5·(−1.75) = 3.25; Var = 3.25 / 17.5² · 6/4 = 0.0159184…; se = 0.126168…
    const x = [0, 1, 2, 3, 4, 5];
    const y = [1, 3, 2, 3, 6, 6];
    const fit = linearRegression(x, y);
    expect(fit.slope).toBeCloseTo(1, 12);
    expect(fit.intercept).toBeCloseTo(1, 12);
    const { se } = slopeNeweyWestSe(x, y, fit, 1, false);
    expect(se).toBeCloseTo(Math.sqrt((3.25 / (17.5 * 17.5)) * 1.5), 12);
    expect(se).toBeCloseTo(0.126168, 5);
    // With lag 0 it is White's heteroscedasticity-robust form: √(5 / 17.5² · 1.5) = 0.156492…
    expect(slopeNeweyWestSe(x, y, fit, 0, false).se).toBeCloseTo(0.156492, 5);
    // Prewhitened with one lag, by hand: ρ = Σuₜuₜ₋₁ / Σuₜ₋₁² = −1.75 / 5 = −0.35 (the last
    // score is 0, so Σuₜ₋₁² = Σu² = 5); w = uₜ − ρ·uₜ₋₁ for t = 1…5 = [−1.5, −0.025, −0.325, 1.325, 0.525];
    // Σw² = 2.25 + 0.000625 + 0.105625 + 1.755625 + 0.275625 = 4.3875;
    // lag-1: (−1.5)(−0.025) + (−0.025)(−0.325) + (−0.325)(1.325) + (1.325)(0.525) = 0.0375 + 0.008125 − 0.430625 + 0.695625 = 0.310625;
    // S_w = 4.3875 + 0.310625 = 4.698125; recoloured: 4.698125 / 1.35² · 6/5 = 3.093580…;
    // Var = 3.093580 / 306.25 · 1.5 = 0.0151522…; se = 0.123094…
    const pw = slopeNeweyWestSe(x, y, fit, 1, true);
    expect(pw.rho).toBeCloseTo(-0.35, 12);
    expect(pw.se).toBeCloseTo(Math.sqrt(((4.698125 / 1.35 ** 2) * 1.2 * 1.5) / 306.25), 10);
    expect(pw.se).toBeCloseTo(0.123094, 5);
  });

  /** Share of AR(1) series (slope 0.1 °C/day, unit innovations) whose 95 % interval covers the slope. */
  function coverage(n: number, rho: number, trials: number): { ols: number; nw: number } {
    const z = normalSource(mulberry32(2026));
    const slope = 0.1;
    let coverOls = 0;
    let coverNw = 0;
    const t = Array.from({ length: n }, (_, i) => i * SECONDS_PER_DAY);
    for (let k = 0; k < trials; k++) {
      let e = z() / Math.sqrt(1 - rho * rho);
      const y: number[] = [];
      for (let i = 0; i < n; i++) {
        if (i > 0) e = rho * e + z();
        y.push(slope * i + e);
      }
      const nw = driftRate(t, y).per30DaysInterval;
      const ols = driftRate(t, y, undefined, { interval: 'ols' }).per30DaysInterval;
      if (nw[0] <= 30 * slope && 30 * slope <= nw[1]) coverNw++;
      if (ols[0] <= 30 * slope && 30 * slope <= ols[1]) coverOls++;
    }
    return { ols: coverOls / trials, nw: coverNw / trials };
  }

  it('a nominal 95 % interval covers the true slope of AR(1) daily series far more often than the ordinary one, and nearly 95 % on long series', () => {
    // Long-run variance of AR(1) noise with ρ = 0.5 is (1 + ρ)/(1 − ρ) = 3 times its variance,
    // so the ordinary interval is about √3 too narrow and covers about 75 % whatever the length.
    // Autocorrelation-consistent intervals are known to cover less than their nominal level on
    // short series and to approach it as the series lengthens (Andrews 1991; Andrews and
    // Monahan 1992): measured here 0.85 over 60 days (the default lookback), 0.92 over 500.
    const short = coverage(60, 0.5, 2000);
    expect(short.ols).toBeLessThan(0.8);
    expect(short.nw).toBeGreaterThan(0.82);
    expect(short.nw - short.ols).toBeGreaterThan(0.06);
    const long = coverage(500, 0.5, 1000);
    expect(long.ols).toBeLessThan(0.8);
    expect(long.nw).toBeGreaterThan(0.9);
    expect(long.nw).toBeLessThan(0.97);
  });

  it('on independent days it is close to the ordinary interval', () => {
    const rand = mulberry32(7);
    const z = normalSource(rand);
    const n = 60;
    const t = Array.from({ length: n }, (_, i) => i * SECONDS_PER_DAY);
    let ratio = 0;
    const trials = 300;
    for (let k = 0; k < trials; k++) {
      const y = t.map((_, i) => 0.05 * i + z());
      const nw = driftRate(t, y).per30DaysInterval;
      const ols = slopeConfidenceInterval(linearRegression(t.map((s) => s / SECONDS_PER_DAY), y));
      ratio += (nw[1] - nw[0]) / (30 * (ols[1] - ols[0]));
    }
    expect(ratio / trials).toBeGreaterThan(0.85);
    expect(ratio / trials).toBeLessThan(1.1);
  });
});

describe('minimum span of a drift rate', () => {
  it('a steep rate over fewer days than the span asked for is not significant', () => {
    const t = [0, 1, 2, 3].map((d) => d * SECONDS_PER_DAY);
    const y = [0, -1, -2.1, -2.9];
    expect(driftRate(t, y).significant).toBe(true);
    expect(driftRate(t, y, undefined, { minSpanDays: 5 }).significant).toBe(false);
    expect(driftRate([...t, 5 * SECONDS_PER_DAY], [...y, -5], undefined, { minSpanDays: 5 }).significant).toBe(true);
  });
});
