/**
 * Baselines against corrected load: the unit's own normal value of a quantity as a
 * function of corrected load, learnt from a reference window. Binned robust statistics (median,
 * MAD, a high quantile, count per bin, and the median load of the bin's rings), linear
 * interpolation between the bins' median loads (not their centres: at base load the rings sit
 * at one edge of their bin), and "no
 * baseline" (null) where a bin is thin or the load is outside the fitted range: never an
 * extrapolation. A unit baseline is versioned and serialisable; the fit time and author are
 * parameters, never read from a clock.
 */
import { MAD_TO_SIGMA } from './stats.ts';

export interface BaselineOptions {
  /** Bin width, load fraction (0.05 = 5 % bins). */
  binWidth: number;
  /** Load range covered by the bins, fractions. */
  loadMin: number;
  loadMax: number;
  /** Bins with fewer samples than this are "no baseline here". */
  minCount: number;
  /** Level of the high quantile kept per bin (the spread limit uses it). */
  highQuantile: number;
}

/** Defaults: 5 % bins from 0 to 120 % load; 30 samples per bin; 95th percentile. */
export const defaultBaselineOptions: BaselineOptions = { binWidth: 0.05, loadMin: 0, loadMax: 1.2, minCount: 30, highQuantile: 0.95 };

/** The defaults with a unit's configured bin width and the rings a bin needs. */
export function baselineOptionsFor(settings: { baselineBinWidth: number; baselineMinBinCount: number }): BaselineOptions {
  return { ...defaultBaselineOptions, binWidth: settings.baselineBinWidth, minCount: settings.baselineMinBinCount };
}

/** Number of load bins: loadMin to loadMax in steps of binWidth (the last one may reach past loadMax). */
export function loadBinCount(options: BaselineOptions): number {
  return Math.max(1, Math.ceil((options.loadMax - options.loadMin) / options.binWidth - 1e-9));
}

/** What a reference window offers a fit: its steady rings, and how many the fullest load bin holds. */
export interface WindowSupply {
  steadyRings: number;
  fullestBin: number;
}

/**
 * Why no baseline can be fitted over [fromMs, toMs) with this supply of steady rings, or null
 * when one can: the window must hold steady analysed rings, and at least one load bin must
 * hold `minCount` of them (a thinner bin is "no baseline here", and a baseline of thin bins
 * only would judge nothing). The same check refuses a request at the door and fails a fit.
 */
export function baselineWindowProblem(unitId: string, fromMs: number, toMs: number, supply: WindowSupply, minCount: number): string | null {
  const from = new Date(fromMs).toISOString();
  const to = new Date(toMs).toISOString();
  if (supply.steadyRings === 0) return `unit ${unitId} has no steady analysed rings between ${from} and ${to}`;
  if (supply.fullestBin < minCount) return `no load bin between ${from} and ${to} holds ${minCount} steady rings (the fullest holds ${supply.fullestBin}); choose a longer window`;
  return null;
}

/** One load bin. Statistics are null when the bin is thin. */
export interface BaselineBin {
  loFraction: number;
  hiFraction: number;
  count: number;
  /**
   * Median corrected load of the bin's rings, fraction: where the bin's statistics belong on the
   * load axis (null when the bin is thin; absent in baselines fitted before it was kept, which
   * are read at the bin centre).
   */
  loadMedian?: number | null;
  median: number | null;
  /** Median absolute deviation (unscaled). */
  mad: number | null;
  high: number | null;
}

/** Baseline of one quantity versus corrected load. */
export interface BinnedBaseline {
  binWidth: number;
  loadMin: number;
  minCount: number;
  highQuantile: number;
  bins: BaselineBin[];
}

/** The baseline at one load: centre, robust σ (1.4826·MAD), high quantile, and the bin count. */
export interface BaselineValue {
  median: number;
  scale: number;
  high: number;
  count: number;
}

/**
 * Fits a binned baseline: bin b holds loads in [loadMin + b·w, loadMin + (b+1)·w); per bin the
 * median, MAD and high quantile of the finite values. Pairs with a non-finite load or value are
 * skipped. Example: 100 values of 500 ± 1 at loads 0.80–0.85 → bin 16 median ≈ 500.
 */
export function fitBinnedBaseline(
  loadFractions: ArrayLike<number>,
  values: ArrayLike<number | null>,
  options: BaselineOptions = defaultBaselineOptions,
): BinnedBaseline {
  const w = options.binWidth;
  const nb = loadBinCount(options);
  const buckets: number[][] = Array.from({ length: nb }, () => []);
  const bucketLoads: number[][] = Array.from({ length: nb }, () => []);
  const len = Math.min(loadFractions.length, values.length);
  for (let i = 0; i < len; i++) {
    const l = loadFractions[i];
    const v = values[i];
    if (!Number.isFinite(l) || typeof v !== 'number' || !Number.isFinite(v)) continue;
    const b = Math.floor((l - options.loadMin) / w);
    if (b < 0 || b >= nb) continue;
    buckets[b].push(v);
    bucketLoads[b].push(l);
  }
  const bins: BaselineBin[] = buckets.map((vals, b) => binStats(vals, bucketLoads[b], options.loadMin + b * w, options.loadMin + (b + 1) * w, options));
  return { binWidth: w, loadMin: options.loadMin, minCount: options.minCount, highQuantile: options.highQuantile, bins };
}

function binStats(vals: number[], loads: number[], lo: number, hi: number, options: BaselineOptions): BaselineBin {
  const count = vals.length;
  if (count < options.minCount || count === 0) return { loFraction: lo, hiFraction: hi, count, loadMedian: null, median: null, mad: null, high: null };
  // Order statistics by selection, not a full sort: the same values as medianOfSorted and
  // quantileOfSorted of the sorted bin (the bins of a month of rings hold thousands of values).
  const s = Float64Array.from(vals);
  const med = medianBySelection(s, count);
  const q = Math.min(Math.max(options.highQuantile, 0), 1) * (count - 1);
  const qlo = Math.floor(q);
  const qhi = Math.min(qlo + 1, count - 1);
  const atLo = selectInPlace(s, count, qlo);
  const atHi = qhi === qlo ? atLo : minFrom(s, qlo + 1, count);
  const high = atLo + (q - qlo) * (atHi - atLo);
  const dev = new Float64Array(count);
  for (let i = 0; i < count; i++) dev[i] = Math.abs(s[i] - med);
  const loadMedian = medianBySelection(Float64Array.from(loads), count);
  return { loFraction: lo, hiFraction: hi, count, loadMedian, median: med, mad: medianBySelection(dev, count), high };
}

/**
 * The k-th smallest (from 0) of a[0..n), moving it to a[k] with nothing larger before it and
 * nothing smaller after it (Wirth's selection, median-of-three pivot). a holds finite values.
 */
function selectInPlace(a: Float64Array, n: number, k: number): number {
  let l = 0;
  let r = n - 1;
  while (l < r) {
    const p = a[l];
    const q = a[(l + r) >> 1];
    const z = a[r];
    const x = p < q ? (q < z ? q : p < z ? z : p) : p < z ? p : q < z ? z : q;
    let i = l;
    let j = r;
    do {
      while (a[i] < x) i++;
      while (x < a[j]) j--;
      if (i <= j) {
        const t = a[i];
        a[i] = a[j];
        a[j] = t;
        i++;
        j--;
      }
    } while (i <= j);
    if (j < k) l = i;
    if (k < i) r = j;
  }
  return a[k];
}

/** Smallest of a[from..to). */
function minFrom(a: Float64Array, from: number, to: number): number {
  let m = a[from];
  for (let i = from + 1; i < to; i++) if (a[i] < m) m = a[i];
  return m;
}

/** Largest of a[0..to). */
function maxBefore(a: Float64Array, to: number): number {
  let m = a[0];
  for (let i = 1; i < to; i++) if (a[i] > m) m = a[i];
  return m;
}

/** medianOfSorted of the sorted first n values of a, by selection (reorders a). */
function medianBySelection(a: Float64Array, n: number): number {
  if (n <= 0) return NaN;
  const h = n >> 1;
  const upper = selectInPlace(a, n, h);
  return n % 2 === 1 ? upper : 0.5 * (maxBefore(a, h) + upper);
}

/** Where a load falls among the bins (see locate); one per module, filled by each call. */
const LOC: { bin: BaselineBin; other: BaselineBin | null; t: number } = { bin: null as unknown as BaselineBin, other: null, t: 0 };

/** Where a bin's statistics sit on the load axis: its rings' median load, or its centre in a baseline that did not keep it. */
function binLoad(bin: BaselineBin): number {
  return typeof bin.loadMedian === 'number' ? bin.loadMedian : 0.5 * (bin.loFraction + bin.hiFraction);
}

/**
 * Finds L's bin and, when it is fitted too, the neighbouring bin on L's side of the bin's median
 * load, with the interpolation weight t (0 at this bin's median load, 1 at the neighbour's);
 * false when L is outside the bins or its bin is thin.
 */
function locate(b: BinnedBaseline, loadFraction: number): boolean {
  if (!Number.isFinite(loadFraction)) return false;
  const w = b.binWidth;
  const i = Math.floor((loadFraction - b.loadMin) / w);
  if (i < 0 || i >= b.bins.length) return false;
  const bin = b.bins[i];
  if (bin.median === null) return false;
  const at = binLoad(bin);
  const j = loadFraction >= at ? i + 1 : i - 1;
  const other = j >= 0 && j < b.bins.length ? b.bins[j] : null;
  LOC.bin = bin;
  LOC.other = other && other.median !== null ? other : null;
  const gap = LOC.other ? Math.abs(binLoad(LOC.other) - at) : 0;
  LOC.t = gap > 0 ? Math.min(1, Math.abs(loadFraction - at) / gap) : 0;
  return true;
}

/**
 * The baseline at load L: find L's bin; null if outside the bins or thin. Interpolate linearly
 * between the bin's median load and the neighbouring bin's, on L's side, when that bin is
 * fitted too; otherwise the bin's own values. scale = 1.4826·MAD.
 */
export function baselineAt(b: BinnedBaseline, loadFraction: number): BaselineValue | null {
  if (!locate(b, loadFraction)) return null;
  const { bin, other, t } = LOC;
  const own = { median: bin.median as number, scale: MAD_TO_SIGMA * (bin.mad as number), high: bin.high as number, count: bin.count };
  if (!other) return own;
  return {
    median: own.median + t * ((other.median as number) - own.median),
    scale: own.scale + t * (MAD_TO_SIGMA * (other.mad as number) - own.scale),
    high: own.high + t * ((other.high as number) - own.high),
    count: Math.min(bin.count, other.count),
  };
}

/**
 * The median and scale of baselineAt(b, loadFraction) written into `out`, without building the
 * value; false (out untouched) where baselineAt gives null.
 */
export function baselineMedianScaleInto(b: BinnedBaseline, loadFraction: number, out: { median: number; scale: number }): boolean {
  if (!locate(b, loadFraction)) return false;
  const { bin, other, t } = LOC;
  const median = bin.median as number;
  const scale = MAD_TO_SIGMA * (bin.mad as number);
  out.median = other ? median + t * ((other.median as number) - median) : median;
  out.scale = other ? scale + t * (MAD_TO_SIGMA * (other.mad as number) - scale) : scale;
  return true;
}

/** baselineAt(b, loadFraction)?.median without building the value: NaN where baselineAt gives null. */
export function baselineMedianAt(b: BinnedBaseline, loadFraction: number): number {
  if (!locate(b, loadFraction)) return NaN;
  const { bin, other, t } = LOC;
  const median = bin.median as number;
  return other ? median + t * ((other.median as number) - median) : median;
}

/** One ring's contribution to a unit baseline. Arrays: index 0 = thermocouple / chamber 1. */
export interface BaselineSample {
  loadFraction: number;
  ringMeanDegC: number;
  spreadDegC: number;
  thermocoupleDeviationDegC: ArrayLike<number | null>;
  chamberDeviationDegC: ArrayLike<number | null>;
}

/** Who fitted a baseline, over which window, and when (all given by the caller). */
export interface BaselineMeta {
  version: number;
  /** Reference window, RFC 3339 strings or any identifiers the caller stores. */
  window: { from: string; to: string };
  fittedAt: string;
  fittedBy: string;
}

export const BASELINE_METHOD = 'binned-median-mad';
export const BASELINE_FORMAT = 1;

/** A versioned unit baseline: ring mean, spread, every thermocouple deviation and chamber estimate. */
export interface UnitBaseline extends BaselineMeta {
  format: number;
  method: string;
  options: BaselineOptions;
  sampleCount: number;
  ringMean: BinnedBaseline;
  spread: BinnedBaseline;
  thermocouples: BinnedBaseline[];
  chambers: BinnedBaseline[];
}

/** Fits a unit baseline from the reference window's steady samples (the caller filters them). */
export function fitUnitBaseline(samples: readonly BaselineSample[], meta: BaselineMeta, options: BaselineOptions = defaultBaselineOptions): UnitBaseline {
  const loads = samples.map((s) => s.loadFraction);
  const m = samples.reduce((mx, s) => Math.max(mx, s.thermocoupleDeviationDegC.length), 0);
  const n = samples.reduce((mx, s) => Math.max(mx, s.chamberDeviationDegC.length), 0);
  const column = (pick: (s: BaselineSample) => number | null) => samples.map(pick);
  return {
    ...meta,
    window: { ...meta.window },
    format: BASELINE_FORMAT,
    method: BASELINE_METHOD,
    options: { ...options },
    sampleCount: samples.length,
    ringMean: fitBinnedBaseline(loads, column((s) => s.ringMeanDegC), options),
    spread: fitBinnedBaseline(loads, column((s) => s.spreadDegC), options),
    thermocouples: Array.from({ length: m }, (_, i) => fitBinnedBaseline(loads, column((s) => s.thermocoupleDeviationDegC[i] ?? null), options)),
    chambers: Array.from({ length: n }, (_, k) => fitBinnedBaseline(loads, column((s) => s.chamberDeviationDegC[k] ?? null), options)),
  };
}

/** JSON text of a baseline (all numbers finite or null by construction). */
export function serialiseBaseline(b: UnitBaseline): string {
  return JSON.stringify(b);
}

/** Reads a baseline back from JSON; throws an Error naming what is wrong. */
export function parseBaseline(text: string): UnitBaseline {
  const b = JSON.parse(text) as UnitBaseline;
  if (b === null || typeof b !== 'object') throw new Error('baseline JSON must be an object');
  if (b.format !== BASELINE_FORMAT) throw new Error(`baseline format ${String(b.format)} is not supported (expected ${BASELINE_FORMAT})`);
  if (!Number.isInteger(b.version)) throw new Error('baseline version must be an integer');
  for (const key of ['ringMean', 'spread'] as const) {
    if (!b[key] || !Array.isArray(b[key].bins)) throw new Error(`baseline ${key} has no bins`);
  }
  if (!Array.isArray(b.thermocouples) || !Array.isArray(b.chambers)) throw new Error('baseline needs thermocouples and chambers arrays');
  return b;
}
