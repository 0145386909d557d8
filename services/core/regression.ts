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

/**
 * Newey–West lag for a series of n points: Andrews' (1991) plug-in bandwidth for the Bartlett
 * kernel under an AR(1) model of the scores, S = 1.1447·(α·n)^(1/3) with
 * α = 4ρ² / ((1 − ρ)²·(1 + ρ)²), ρ the lag-1 autocorrelation of the scores (clamped to ±0.97),
 * rounded down and kept below n / 2. A series with no autocorrelation gets lag 0 (the
 * heteroscedasticity-robust form); one that wanders gets more lags.
 */
export function neweyWestLag(scores: ArrayLike<number>): number {
  const n = scores.length;
  if (n < 3) return 0;
  let num = 0;
  let den = 0;
  for (let t = 0; t < n; t++) {
    den += scores[t] * scores[t];
    if (t > 0) num += scores[t] * scores[t - 1];
  }
  if (!(den > 0)) return 0;
  const rho = Math.max(-0.97, Math.min(0.97, num / den));
  const alpha = (4 * rho * rho) / ((1 - rho) ** 2 * (1 + rho) ** 2);
  const s = 1.1447 * Math.cbrt(alpha * n);
  return Math.max(0, Math.min(Math.floor(s), Math.floor((n - 1) / 2)));
}

/**
 * Newey–West (1987) heteroscedasticity- and autocorrelation-consistent standard error of the OLS
 * slope, for points in time order. With scores uₜ = (xₜ − x̄)·eₜ (eₜ the OLS residual) and
 * Bartlett weights, the long-run variance of the scores is
 *   S = Σₜ uₜ² + 2·Σₗ₌₁..L (1 − l/(L+1))·Σₜ uₜ·uₜ₋ₗ,
 * and Var(b1) = S / Sxx² · n/(n − 2) (the usual small-sample factor). `prewhiten` (default false)
 * first takes an AR(1) out of the scores, wₜ = uₜ − ρ·uₜ₋₁, computes S of w and recolours it by
 * 1/(1 − ρ)² (Andrews and Monahan, Econometrica 60 (1992)). It covers better on short series of
 * stationary noise, but a real drift that is not a straight line (a nozzle plugging over two
 * weeks, then holding) leaves smooth residuals with ρ near 1, and the recolouring then widens
 * the interval a hundredfold: the drift rate uses the plain form. `lag` defaults to
 * neweyWestLag of the (whitened) scores. Points where x or y is not finite are skipped. NaN
 * with fewer than 3 points.
 */
export function slopeNeweyWestSe(
  x: ArrayLike<number>,
  y: ArrayLike<number>,
  fit: LinearFit = linearRegression(x, y),
  lag?: number,
  prewhiten = false,
): { se: number; lag: number; rho: number } {
  const n = fit.n;
  if (n < 3 || !Number.isFinite(fit.slope)) return { se: NaN, lag: 0, rho: NaN };
  let mx = 0;
  const len = Math.min(x.length, y.length);
  for (let i = 0; i < len; i++) if (Number.isFinite(x[i]) && Number.isFinite(y[i])) mx += x[i];
  mx /= n;
  let sxx = 0;
  const u: number[] = [];
  for (let i = 0; i < len; i++) {
    if (!Number.isFinite(x[i]) || !Number.isFinite(y[i])) continue;
    const dx = x[i] - mx;
    sxx += dx * dx;
    u.push(dx * (y[i] - fit.intercept - fit.slope * x[i]));
  }
  let rho = 0;
  let w = u;
  if (prewhiten) {
    let num = 0;
    let den = 0;
    for (let t = 1; t < n; t++) {
      num += u[t] * u[t - 1];
      den += u[t - 1] * u[t - 1];
    }
    rho = den > 0 ? Math.max(-0.97, Math.min(0.97, num / den)) : 0;
    w = [];
    for (let t = 1; t < n; t++) w.push(u[t] - rho * u[t - 1]);
  }
  const nw = w.length;
  const L = lag ?? neweyWestLag(w);
  let s = 0;
  for (let t = 0; t < nw; t++) s += w[t] * w[t];
  for (let l = 1; l <= L; l++) {
    let c = 0;
    for (let t = l; t < nw; t++) c += w[t] * w[t - l];
    s += 2 * (1 - l / (L + 1)) * c;
  }
  // Back to the scores' scale: n terms, recoloured by the AR(1) taken out.
  if (prewhiten) s = ((s / (1 - rho) ** 2) * n) / nw;
  const v = (Math.max(s, 0) / (sxx * sxx)) * (n / (n - 2));
  return { se: Math.sqrt(v), lag: L, rho };
}

/**
 * Two-sided interval b1 ± t(1 − α/2, n − 2)·se_NW(b1) on the slope of points in time order, with
 * the Newey–West standard error: an interval that stays honest when the residuals are
 * autocorrelated, where the ordinary one (slopeConfidenceInterval) is too narrow.
 */
export function slopeNeweyWestInterval(x: ArrayLike<number>, y: ArrayLike<number>, confidence = 0.95, fit: LinearFit = linearRegression(x, y), lag?: number): [number, number] {
  if (!(fit.degreesOfFreedom > 0)) return [NaN, NaN];
  const { se } = slopeNeweyWestSe(x, y, fit, lag);
  if (!Number.isFinite(se)) return [NaN, NaN];
  const t = studentTQuantile(1 - (1 - confidence) / 2, fit.degreesOfFreedom);
  return [fit.slope - t * se, fit.slope + t * se];
}
