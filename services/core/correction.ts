/**
 * Corrected (referred) parameters: the similarity groups that put readings taken on a hot or a
 * cold day, at high or low ambient pressure, on one scale. Reference conditions are the ISO
 * 3977-2 standard day (15 °C, 101.325 kPa). Also the steady-state test that decides whether a
 * ring may enter a baseline. Pure functions; time is always a parameter.
 */
import type { UnitConfig } from './types.ts';
import { KELVIN_OFFSET } from './temperature.ts';

/** ISO 3977-2 standard-day temperature, K. */
export const ISO_TEMPERATURE_K = 288.15;
/** ISO 3977-2 standard-day pressure, kPa. */
export const ISO_PRESSURE_KPA = 101.325;

/** Exponents of the corrected-power group P / (δ^deltaExponent · θ^thetaExponent). */
export interface CorrectionExponents {
  deltaExponent: number;
  thetaExponent: number;
}

/** The textbook exponents: P / (δ · √θ). */
export const DEFAULT_CORRECTION: CorrectionExponents = { deltaExponent: 1, thetaExponent: 0.5 };

/** θ = T_amb / 288.15 K. Example: thetaFromAmbientC(30) = 1.052056. */
export function thetaFromAmbientC(ambientDegC: number): number {
  return (ambientDegC + KELVIN_OFFSET) / ISO_TEMPERATURE_K;
}

/** δ = p_amb / 101.325 kPa. Example: deltaFromAmbientKPa(99.0) = 0.977054. */
export function deltaFromAmbientKPa(ambientKPa: number): number {
  return ambientKPa / ISO_PRESSURE_KPA;
}

/**
 * Corrected power P / (δ^a · θ^b), same unit as the input (MW). Default a = 1, b = 0.5.
 * Example: 100 MW at θ = 1.052056, δ = 0.977054 → 99.784 MW.
 */
export function correctedPowerMw(powerMw: number, theta: number, delta: number, exps: CorrectionExponents = DEFAULT_CORRECTION): number {
  return powerMw / (Math.pow(delta, exps.deltaExponent) * Math.pow(theta, exps.thetaExponent));
}

/** Corrected speed N / √θ (any speed unit). Example: 3000 rpm at θ = 1.052056 → 2924.84 rpm. */
export function correctedSpeed(speed: number, theta: number): number {
  return speed / Math.sqrt(theta);
}

/** Corrected mass flow W · √θ / δ (any flow unit). Example: 400 kg/s → 419.915 kg/s at 30 °C, 99.0 kPa. */
export function correctedFlow(flow: number, theta: number, delta: number): number {
  return (flow * Math.sqrt(theta)) / delta;
}

/** Corrected fuel flow Wf / (δ · √θ) (any flow unit). */
export function correctedFuelFlow(fuelFlow: number, theta: number, delta: number): number {
  return fuelFlow / (delta * Math.sqrt(theta));
}

/** Corrected temperature T / θ, in kelvin (the group is defined on absolute temperature). */
export function correctedTemperatureK(temperatureK: number, theta: number): number {
  return temperatureK / theta;
}

/** Corrected temperature T / θ for a temperature given and returned in °C. */
export function correctedTemperatureC(temperatureDegC: number, theta: number): number {
  return correctedTemperatureK(temperatureDegC + KELVIN_OFFSET, theta) - KELVIN_OFFSET;
}

/**
 * Corrected load fraction: corrected power / rated power at ISO conditions, with the unit's
 * configured exponents. NaN when any input is missing or the rating is not positive.
 * Example: 100 MW of a 120 MW unit at 30 °C, 99.0 kPa → 99.784 / 120 = 0.83153.
 */
export function correctedLoadFraction(
  powerMw: number,
  ambientDegC: number,
  ambientKPa: number,
  config: Pick<UnitConfig, 'ratedPowerMw' | 'correction'>,
): number {
  if (!(config.ratedPowerMw > 0) || !(ambientKPa > 0)) return NaN;
  const theta = thetaFromAmbientC(ambientDegC);
  if (!(theta > 0)) return NaN;
  const exps = config.correction ?? DEFAULT_CORRECTION;
  return correctedPowerMw(powerMw, theta, deltaFromAmbientKPa(ambientKPa), exps) / config.ratedPowerMw;
}

/** Limits of the steady-state test. */
export interface SteadyStateOptions {
  /** Largest allowed distance of shaft speed from synchronous, percent of rated speed. */
  speedTolerancePct: number;
  /** Largest allowed load change rate over the window, load fraction per minute. */
  maxLoadRatePerMin: number;
  /** Length of the preceding window examined, seconds. */
  windowS: number;
  /** Smallest share of the window that must hold samples for a verdict (else not steady). */
  minWindowCoverage: number;
}

/**
 * Default steady-state limits (common practice, no written source): speed within 1 % of
 * synchronous, load moving less than 0.5 % of rating per minute over the preceding 10 minutes.
 */
export const defaultSteadyStateOptions: SteadyStateOptions = {
  speedTolerancePct: 1,
  maxLoadRatePerMin: 0.005,
  windowS: 600,
  minWindowCoverage: 0.5,
};

export type SteadyReason = 'steady' | 'speed_off_synchronous' | 'load_changing' | 'too_few_samples' | 'missing_input';

export interface SteadyStateResult {
  steady: boolean;
  reason: SteadyReason;
  /** (max − min) of load over the window divided by the window length, fraction per minute. */
  loadRatePerMin: number;
}

/**
 * Steady-state test at time atS (seconds, any epoch): speed within tolerance of 100 %, and the
 * load range over [atS − windowS, atS] divided by the window length below the limit.
 * timesS and loadFractions are the unit's recent samples (any order).
 */
export function steadyState(
  speedPct: number,
  timesS: ArrayLike<number>,
  loadFractions: ArrayLike<number>,
  atS: number,
  options: SteadyStateOptions = defaultSteadyStateOptions,
): SteadyStateResult {
  if (!Number.isFinite(speedPct) || !Number.isFinite(atS)) return { steady: false, reason: 'missing_input', loadRatePerMin: NaN };
  let lo = Infinity;
  let hi = -Infinity;
  let tFirst = Infinity;
  let n = 0;
  const from = atS - options.windowS;
  for (let i = 0; i < timesS.length; i++) {
    const t = timesS[i];
    const l = loadFractions[i];
    if (!(t >= from && t <= atS) || !Number.isFinite(l)) continue;
    n++;
    if (l < lo) lo = l;
    if (l > hi) hi = l;
    if (t < tFirst) tFirst = t;
  }
  return steadyStateOfWindow(speedPct, atS, n, lo, hi, tFirst, options);
}

/**
 * The steady-state test from a summary of the window's samples (as steadyState gathers it):
 * n samples with a finite load at times in [atS − windowS, atS], their lowest and highest
 * load, and the earliest time among them (Infinity, −Infinity, Infinity when n = 0). For
 * callers that keep the summary as samples arrive instead of scanning the window every time.
 */
export function steadyStateOfWindow(speedPct: number, atS: number, n: number, lo: number, hi: number, tFirst: number, options: SteadyStateOptions = defaultSteadyStateOptions): SteadyStateResult {
  if (!Number.isFinite(speedPct) || !Number.isFinite(atS)) return { steady: false, reason: 'missing_input', loadRatePerMin: NaN };
  const rate = n > 0 ? (hi - lo) / (options.windowS / 60) : NaN;
  if (Math.abs(speedPct - 100) > options.speedTolerancePct) return { steady: false, reason: 'speed_off_synchronous', loadRatePerMin: rate };
  if (n < 2 || atS - tFirst < options.minWindowCoverage * options.windowS) return { steady: false, reason: 'too_few_samples', loadRatePerMin: rate };
  if (rate > options.maxLoadRatePerMin) return { steady: false, reason: 'load_changing', loadRatePerMin: rate };
  return { steady: true, reason: 'steady', loadRatePerMin: rate };
}
