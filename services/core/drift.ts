/**
 * Drift and change: robust aggregates of residuals per period, drift rate by linear
 * regression with a confidence interval (°C per 30 days and per 1000 fired hours), two-sided
 * tabular CUSUM and EWMA on standardised residuals as serialisable incremental state, and
 * removal of the common-mode part shared by all chambers. Pure; time is a parameter.
 */
import { linearRegression, slopeConfidenceInterval, slopeNeweyWestInterval, type LinearFit } from './regression.ts';
import { MAD_TO_SIGMA, medianOfSorted, sortedFinite } from './stats.ts';

export const SECONDS_PER_DAY = 86_400;

/** Robust summary of residuals over one period. */
export interface PeriodAggregate {
  /** Start of the period, seconds (same epoch as the input times). */
  periodStartS: number;
  count: number;
  median: number;
  /** Unscaled MAD. */
  mad: number;
  mean: number;
}

/**
 * Groups (time, value) pairs into periods [origin + j·period, origin + (j+1)·period) and returns
 * the median, MAD, mean and count of the finite values of each non-empty period, in time order.
 */
export function aggregateByPeriod(timesS: ArrayLike<number>, values: ArrayLike<number | null>, periodS: number, originS = 0): PeriodAggregate[] {
  const groups = new Map<number, number[]>();
  const len = Math.min(timesS.length, values.length);
  for (let i = 0; i < len; i++) {
    const t = timesS[i];
    const v = values[i];
    if (!Number.isFinite(t) || typeof v !== 'number' || !Number.isFinite(v)) continue;
    const j = Math.floor((t - originS) / periodS);
    let g = groups.get(j);
    if (!g) groups.set(j, (g = []));
    g.push(v);
  }
  return [...groups.keys()]
    .sort((a, b) => a - b)
    .map((j) => {
      const vals = groups.get(j) as number[];
      const s = sortedFinite(vals);
      const med = medianOfSorted(s, s.length);
      const dev = s.map((x) => Math.abs(x - med)).sort();
      return { periodStartS: originS + j * periodS, count: s.length, median: med, mad: medianOfSorted(dev, dev.length), mean: vals.reduce((a, b) => a + b, 0) / vals.length };
    });
}

/** A drift rate with its confidence interval, per 30 days and (when fired hours are known) per 1000 fired hours. */
export interface DriftRate {
  per30DaysDegC: number;
  per30DaysInterval: [number, number];
  per1000FiredHoursDegC: number | null;
  per1000FiredHoursInterval: [number, number] | null;
  confidence: number;
  n: number;
  /** True when the interval on the 30-day rate excludes zero. */
  significant: boolean;
}

/** How the drift rate's interval is made. */
export interface DriftRateOptions {
  /** Two-sided confidence of the interval (default 0.95). */
  confidence?: number;
  /**
   * 'newey-west' (default): the slope's standard error allows for autocorrelated residuals
   * (daily residuals wander with the weather, washes and the season, so neighbouring days are
   * alike and the ordinary interval is too narrow); 'ols': the ordinary t-interval, for
   * independent points.
   */
  interval?: 'newey-west' | 'ols';
  /** A rate over fewer days than this (first to last point) is never significant. Default 0. */
  minSpanDays?: number;
}

/**
 * Drift rate by OLS of aggregate values on time (points in time order): slope in °C per second
 * × 30 days, with its interval (Newey–West by default, see DriftRateOptions); and, when
 * firedHours (cumulative fired hours at each aggregate) is given, the slope on fired hours ×
 * 1000. The rate is significant when the 30-day interval excludes zero and the points span at
 * least minSpanDays.
 */
export function driftRate(timesS: ArrayLike<number>, values: ArrayLike<number>, firedHours?: ArrayLike<number>, options: DriftRateOptions | number = {}): DriftRate {
  const o = typeof options === 'number' ? { confidence: options } : options;
  const confidence = o.confidence ?? 0.95;
  const hac = (o.interval ?? 'newey-west') === 'newey-west';
  const days = Array.from({ length: timesS.length }, (_, i) => timesS[i] / SECONDS_PER_DAY);
  const fit = linearRegression(days, values);
  const ci = hac ? slopeNeweyWestInterval(days, values, confidence, fit) : slopeConfidenceInterval(fit, confidence);
  const per30: [number, number] = [ci[0] * 30, ci[1] * 30];
  let fired: LinearFit | null = null;
  let firedCi: [number, number] | null = null;
  if (firedHours) {
    fired = linearRegression(firedHours, values);
    const c = hac ? slopeNeweyWestInterval(firedHours, values, confidence, fired) : slopeConfidenceInterval(fired, confidence);
    firedCi = [c[0] * 1000, c[1] * 1000];
  }
  let first = Infinity;
  let last = -Infinity;
  for (let i = 0; i < days.length; i++) {
    if (!Number.isFinite(days[i]) || !Number.isFinite(values[i])) continue;
    if (days[i] < first) first = days[i];
    if (days[i] > last) last = days[i];
  }
  const longEnough = last - first >= (o.minSpanDays ?? 0);
  return {
    per30DaysDegC: fit.slope * 30,
    per30DaysInterval: per30,
    per1000FiredHoursDegC: fired ? fired.slope * 1000 : null,
    per1000FiredHoursInterval: firedCi,
    confidence,
    n: fit.n,
    significant: longEnough && (per30[0] > 0 || per30[1] < 0),
  };
}

/** Standardised residual z = (value − baseline) / scale; NaN when the scale is not positive. */
export function standardise(valueDegC: number, baselineDegC: number, scaleDegC: number): number {
  return scaleDegC > 0 ? (valueDegC - baselineDegC) / scaleDegC : NaN;
}

/** Two-sided tabular CUSUM state (plain JSON). k and h are in σ units of the standardised input. */
export interface CusumState {
  k: number;
  h: number;
  /** C⁺ and C⁻ (both ≥ 0). */
  upper: number;
  lower: number;
  /** Samples seen since the last reset. */
  count: number;
  /** Samples since the sums were last zero on the signalling side (a change-point estimate). */
  upperRun: number;
  lowerRun: number;
}

export type CusumSignal = 'up' | 'down' | null;

/** New CUSUM state; defaults k = 0.5, h = 5 (Montgomery). */
export function createCusum(k = 0.5, h = 5): CusumState {
  return { k, h, upper: 0, lower: 0, count: 0, upperRun: 0, lowerRun: 0 };
}

/**
 * One CUSUM step on standardised z (mutates state): C⁺ = max(0, z − k + C⁺), C⁻ = max(0, −z − k + C⁻).
 * Returns 'up' or 'down' when C⁺ or C⁻ exceeds h, else null. Non-finite z is ignored.
 */
export function updateCusum(state: CusumState, z: number): CusumSignal {
  if (!Number.isFinite(z)) return null;
  state.count++;
  state.upper = Math.max(0, z - state.k + state.upper);
  state.lower = Math.max(0, -z - state.k + state.lower);
  state.upperRun = state.upper > 0 ? state.upperRun + 1 : 0;
  state.lowerRun = state.lower > 0 ? state.lowerRun + 1 : 0;
  if (state.upper > state.h) return 'up';
  if (state.lower > state.h) return 'down';
  return null;
}

/** Clears the sums after a signal has been handled. */
export function resetCusum(state: CusumState): void {
  state.upper = 0;
  state.lower = 0;
  state.count = 0;
  state.upperRun = 0;
  state.lowerRun = 0;
}

/** EWMA state on standardised residuals (plain JSON). */
export interface EwmaState {
  lambda: number;
  /** Control limit width in σ of the statistic. */
  L: number;
  /** Use the exact, time-varying limits (narrower early on) rather than the asymptotic one. */
  exactLimits: boolean;
  z: number;
  count: number;
}

export type EwmaSignal = 'up' | 'down' | null;

/** New EWMA state, starting at the target 0. Lucas & Saccucci: λ = 0.1, L = 2.814 gives ARL ≈ 500. */
export function createEwma(lambda = 0.1, L = 2.814, exactLimits = false): EwmaState {
  return { lambda, L, exactLimits, z: 0, count: 0 };
}

/** Control limit of the EWMA statistic after `count` samples: L·√(λ/(2−λ)·(1 − (1−λ)^{2t})) (asymptotic: t → ∞). */
export function ewmaLimit(state: EwmaState): number {
  const lam = state.lambda;
  const f = state.exactLimits ? 1 - Math.pow(1 - lam, 2 * state.count) : 1;
  return state.L * Math.sqrt((lam / (2 - lam)) * f);
}

/** One EWMA step (mutates state): zₜ = λ·x + (1−λ)·zₜ₋₁; signal when |zₜ| exceeds the limit. */
export function updateEwma(state: EwmaState, x: number): EwmaSignal {
  if (!Number.isFinite(x)) return null;
  state.count++;
  state.z = state.lambda * x + (1 - state.lambda) * state.z;
  const lim = ewmaLimit(state);
  if (state.z > lim) return 'up';
  if (state.z < -lim) return 'down';
  return null;
}

/** Restarts the EWMA at the target. */
export function resetEwma(state: EwmaState): void {
  state.z = 0;
  state.count = 0;
}

/** Residuals with the common mode removed, and the common mode itself. */
export interface CommonModeResult {
  commonModeDegC: number;
  residualsDegC: Float64Array;
}

/**
 * Removes what all chambers share: subtracts the median of the finite residuals from each
 * (non-finite stay NaN). Example: [3, 4, 5, −20] → common mode 3.5, residuals [−0.5, 0.5, 1.5, −23.5].
 */
export function removeCommonMode(residualsDegC: ArrayLike<number | null>): CommonModeResult {
  const s = sortedFinite(residualsDegC);
  const cm = medianOfSorted(s, s.length);
  const out = new Float64Array(residualsDegC.length);
  for (let i = 0; i < out.length; i++) {
    const v = residualsDegC[i];
    out[i] = typeof v === 'number' && Number.isFinite(v) && Number.isFinite(cm) ? v - cm : NaN;
  }
  return { commonModeDegC: cm, residualsDegC: out };
}

/** Robust σ of values: 1.4826 · MAD. */
export function robustSigma(values: ArrayLike<number | null>): number {
  const s = sortedFinite(values);
  const med = medianOfSorted(s, s.length);
  const dev = s.map((x) => Math.abs(x - med)).sort();
  return MAD_TO_SIGMA * medianOfSorted(dev, dev.length);
}
