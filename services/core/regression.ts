/**
 * Ordinary least squares for one predictor, y = b0 + b1·x, with standard errors, residual SD,
 * R² and a confidence interval on the slope. Used by the drift rate and the window validity
 * test; checked against the NIST StRD "Norris" certified values. Pure.
 */
import { studentTQuantile } from './stats.ts';

export interface LinearFit {
  intercept: number;
  slope: number;
  interceptSe: number;
  slopeSe: number;
  /** √(RSS / (n − 2)). */
  residualSd: number;
  rSquared: number;
  residualSumOfSquares: number;
  degreesOfFreedom: number;
  n: number;
}

/**
 * OLS fit of y on x over pairs where both are finite. Centred sums for accuracy:
 * b1 = Sxy/Sxx, b0 = ȳ − b1·x̄, se(b1) = s/√Sxx, se(b0) = s·√(1/n + x̄²/Sxx), s² = RSS/(n−2).
 * Fewer than 2 points (or no spread in x) gives NaN coefficients.
 */
export function linearRegression(x: ArrayLike<number>, y: ArrayLike<number>): LinearFit {
  let n = 0;
  let sx = 0;
  let sy = 0;
  const len = Math.min(x.length, y.length);
  for (let i = 0; i < len; i++) {
    if (!Number.isFinite(x[i]) || !Number.isFinite(y[i])) continue;
    n++;
    sx += x[i];
    sy += y[i];
  }
  const nan: LinearFit = { intercept: NaN, slope: NaN, interceptSe: NaN, slopeSe: NaN, residualSd: NaN, rSquared: NaN, residualSumOfSquares: NaN, degreesOfFreedom: Math.max(n - 2, 0), n };
  if (n < 2) return nan;
  const mx = sx / n;
  const my = sy / n;
  let sxx = 0;
  let sxy = 0;
  let syy = 0;
  for (let i = 0; i < len; i++) {
    if (!Number.isFinite(x[i]) || !Number.isFinite(y[i])) continue;
    const dx = x[i] - mx;
    const dy = y[i] - my;
    sxx += dx * dx;
    sxy += dx * dy;
    syy += dy * dy;
  }
  if (!(sxx > 0)) return nan;
  const slope = sxy / sxx;
  const intercept = my - slope * mx;
  let rss = 0;
  for (let i = 0; i < len; i++) {
    if (!Number.isFinite(x[i]) || !Number.isFinite(y[i])) continue;
    const e = y[i] - intercept - slope * x[i];
    rss += e * e;
  }
  const df = n - 2;
  const s = df > 0 ? Math.sqrt(rss / df) : NaN;
  return {
    intercept,
    slope,
    interceptSe: s * Math.sqrt(1 / n + (mx * mx) / sxx),
    slopeSe: s / Math.sqrt(sxx),
    residualSd: s,
    rSquared: syy > 0 ? 1 - rss / syy : NaN,
    residualSumOfSquares: rss,
    degreesOfFreedom: df,
    n,
  };
}

/** Two-sided confidence interval b1 ± t(1 − α/2, n − 2)·se(b1) on the slope. */
export function slopeConfidenceInterval(fit: LinearFit, confidence = 0.95): [number, number] {
  if (!(fit.degreesOfFreedom > 0) || !Number.isFinite(fit.slopeSe)) return [NaN, NaN];
  const t = studentTQuantile(1 - (1 - confidence) / 2, fit.degreesOfFreedom);
  return [fit.slope - t * fit.slopeSe, fit.slope + t * fit.slopeSe];
}
