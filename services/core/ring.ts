/**
 * The per-ring entry point used on the hot path: `prepareUnit` builds a reusable context for one
 * unit configuration (angles, kernel responses, buffers, a bounded cache of chamber solvers per
 * load bin and validity mask), and `analyseRing` runs validity, coverage, spread and chamber
 * estimates for one ring without allocating. The result object is reused: copy it
 * (`copyRingAnalysis`, `ringAnalysisToJson`) before the next call if you keep it.
 */
import {
  attributeChamber,
  buildChamberSolver,
  estimateChambers,
  plumeKernel,
  type ChamberAttribution,
  type ChamberEstimateOut,
  type ChamberSolver,
  type KernelSpec,
} from './chambers.ts';
import { arcDistanceDeg, chamberAnglesDeg, chamberPitchDeg, thermocoupleAnglesDeg } from './geometry.ts';
import { emptySpread, spreadInto, type SpreadMetrics } from './spread.ts';
import { madOfSorted, medianOfSorted, sortPrefixInPlace } from './stats.ts';
import { swirlDeg } from './swirl.ts';
import { baselineMedianAt, type BaselineSample, type UnitBaseline } from './baseline.ts';
import { checkUnitConfig, MAX_THERMOCOUPLES } from './unit-config.ts';
import { VALIDITY, VALIDITY_REASONS, type PlumeKernel, type Reading, type UnitConfig, type ValidityReason } from './types.ts';
import {
  classifyMissingAndRange,
  coverageInto,
  defaultCoverageOptions,
  defaultValidityOptions,
  loneThermocouple,
  markIsolatedOutliers,
  type Coverage,
  type CoverageOptions,
  type ValidityOptions,
} from './validity.ts';

export interface AnalysisOptions {
  validity: ValidityOptions;
  coverage: CoverageOptions;
  /** Plume kernel shape. */
  kernel: PlumeKernel;
  /** Plume width σ as a fraction of the chamber pitch (engineering judgement: 0.5). */
  plumeWidthFraction: number;
  /** Ridge λ as a fraction of the mean diagonal of WᵀW. */
  ridgeFraction: number;
  /** Width of the load bins that share one solver, load fraction. */
  loadBinWidth: number;
  /** Most solvers kept (least recently used are dropped). */
  maxCachedSolvers: number;
  /** Floor on the residual σ used for chamber uncertainties, °C. */
  residualFloorDegC: number;
  /** Fewer valid thermocouples than this: no chamber estimates. */
  minValidForChambers: number;
  /** Uncertainty of the swirl angle, degrees: sets how the runner-up chamber's likelihood falls off. */
  swirlUncertaintyDeg: number;
  /**
   * A thermocouple this far from its own normal while its neighbours hold is reported as a
   * sensor and left out of the chamber residual map, °C (measured from the median departure
   * of all probes). Engineering judgement: 6 °C is well beyond a healthy probe's wander against
   * its own normal at the same load (its offset is in the normal; what is left is noise of
   * tenths of a degree and a degree or two of load and ambient effects), and below the chamber
   * warning (findings.ts, 12 °C) by more than the chamber map amplifies one reading (up to
   * about 1.6 times with one probe per chamber and narrow plumes), so a sensor is named before
   * the map could blame a chamber for it.
   */
  loneSensorMinDegC: number;
  /**
   * What a neighbour of a lone thermocouple may show besides the plume share, °C: a healthy
   * probe's ring-to-ring wander against its own normal (under 1 °C in the simulator, whose
   * noise is 0.35 °C; engineering judgement: 1 °C). With one probe per chamber, a plume
   * shallower than about 14 °C centred exactly on a probe, at the narrowest mixing the kernel
   * assumes, can then pass for a sensor until it deepens (by calculation: the neighbour share
   * is 0.145, half of it is allowed, 0.0725 × 14 ≈ 1 °C).
   */
  loneSensorNoiseDegC: number;
  /**
   * A chamber's plume covers a thermocouple where the plume kernel (the solver's, at the ring's
   * swirl) puts at least this share of its peak on it. A chamber that covers no valid
   * thermocouple is not observable (its estimate is null, not a healthy 0), and a thermocouple
   * departing alone explains the drift of the chambers that cover it only. Engineering
   * judgement: 0.1, the edge of a plume (at the kernel's width of half a pitch, a probe one
   * pitch from a plume's centre sees 0.135 of it, one and a half pitches 0.011): a chamber
   * stays observable through the probe beside a failed one, not behind two adjacent failures.
   */
  plumeCoverResponse: number;
  /**
   * The narrowest true plume the lone-probe test allows for, σ as a fraction of the chamber
   * pitch: how much of a chamber's plume peaking on a probe its neighbours must see is read off
   * a kernel this wide (or the solver's, if narrower). Real mixing differs from the solver's
   * kernel by tens of per cent; with the solver's own width a narrower real plume (its crest
   * probe's neighbours seeing less than the kernel says) passed for a sensor. Engineering
   * judgement: 0.3 (the solver's 0.5 less 40 %).
   */
  loneSensorNarrowestPlumeFraction: number;
  /**
   * A probe this far from its normal, alone, is not taken for a sensor, °C: a lost flame under a
   * narrow plume sits on one probe by 100–250 °C (the simulator's flame loss: about 200 °C),
   * while a sensor failing that far while still in range is rare (open circuits and broken
   * junctions read out of range); the chamber map names the chamber instead. Engineering
   * judgement: 80 °C, the default critical level of a cold chamber (findings.ts).
   */
  loneSensorMaxDegC: number;
  /**
   * Departures smaller than this share of the ring's largest are not judged by the lone-probe
   * test: a lost flame moves every probe's residual by a few degrees (the corrected load and the
   * ring's centre move with it), enough for a flank probe to look alone beside a 250 °C plume.
   * A lone probe beside a chamber's plume of comparable depth (a nozzle plugging elsewhere) is
   * still judged. Engineering judgement: 0.25.
   */
  loneSensorMinShareOfLargest: number;
}

/** Defaults: engineering judgement unless stated in the field's own comment. */
export const defaultAnalysisOptions: AnalysisOptions = {
  validity: defaultValidityOptions,
  coverage: defaultCoverageOptions,
  kernel: 'von-mises',
  plumeWidthFraction: 0.5,
  ridgeFraction: 0.01,
  loadBinWidth: 0.01,
  maxCachedSolvers: 512,
  residualFloorDegC: 1,
  minValidForChambers: 3,
  swirlUncertaintyDeg: 8,
  loneSensorMinDegC: 6,
  loneSensorNoiseDegC: 1,
  plumeCoverResponse: 0.1,
  loneSensorNarrowestPlumeFraction: 0.3,
  loneSensorMaxDegC: 80,
  loneSensorMinShareOfLargest: 0.25,
};

/** Options that may be given in part; nested groups are merged field by field. */
export type AnalysisOptionsInput = Partial<Omit<AnalysisOptions, 'validity' | 'coverage'>> & {
  validity?: Partial<ValidityOptions>;
  coverage?: Partial<CoverageOptions>;
};

/** Merges partial options over the defaults. */
export function resolveAnalysisOptions(input: AnalysisOptionsInput = {}): AnalysisOptions {
  return {
    ...defaultAnalysisOptions,
    ...input,
    validity: { ...defaultAnalysisOptions.validity, ...input.validity },
    coverage: { ...defaultAnalysisOptions.coverage, ...input.coverage },
  };
}

/** Everything one ring's analysis produces. Index 0 of every array = thermocouple or chamber 1. */
export interface RingAnalysis {
  thermocoupleCount: number;
  chamberCount: number;
  loadFraction: number;
  /** Swirl ψ(L) used for the chamber map, degrees (at the load bin's centre). */
  swirlDeg: number;
  /** Validity code per thermocouple (see VALIDITY). */
  validity: Uint8Array;
  /** Reading − robust centre for valid thermocouples, NaN otherwise, °C. */
  deviationDegC: Float64Array;
  spread: SpreadMetrics;
  coverage: Coverage;
  /** Chamber deviation from the average chamber, °C (NaN when not estimable). */
  chamberDeviationDegC: Float64Array;
  /** One-σ uncertainty of each chamber deviation, °C. */
  chamberUncertaintyDegC: Float64Array;
  /** Fitted ring level (mean plume-free exhaust temperature), °C. */
  ringLevelDegC: number;
  /** Residual SD of the plume fit, °C (NaN when the fit has no spare degrees of freedom). */
  fitResidualSdDegC: number;
  /** Chamber with the largest |deviation|, numbered from 1, and its attribution. */
  worstChamber: number | null;
  worstChamberLikelihood: number;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number;
  coldestChamber: number | null;
  hottestChamber: number | null;
}

/** A unit prepared for repeated ring analysis. Not shared between threads; cheap to keep per unit. */
export interface UnitContext {
  readonly config: UnitConfig;
  readonly options: AnalysisOptions;
  readonly m: number;
  readonly n: number;
  readonly tcAnglesDeg: Float64Array;
  readonly chamberAnglesDeg: Float64Array;
  readonly chamberPitchDeg: number;
  readonly kernel: KernelSpec;
  /** Kernel response at the left / right neighbour's angle for a plume centred on each thermocouple. */
  readonly responseLeft: Float64Array;
  readonly responseRight: Float64Array;
  /** The same for the narrowest plume the lone-probe test allows for (AnalysisOptions.loneSensorNarrowestPlumeFraction). */
  readonly loneShareLeft: Float64Array;
  readonly loneShareRight: Float64Array;
  readonly loadMin: number;
  readonly loadMax: number;
  readonly binCount: number;
  /** ψ at each load bin's centre, degrees. */
  readonly binSwirlDeg: Float64Array;
  /** Per load bin, once asked for: the plume kernel's response of each chamber at each thermocouple (plumeResponseAt). */
  readonly binResponse: (Float64Array | null)[];
  /** Solvers built so far (for inspection and tests). */
  solversBuilt: number;
  /** Current number of cached solvers. */
  readonly cache: Map<string, ChamberSolver>;
  /** Last solvers used per bin (RECENT_PER_BIN slots each), for the allocation-free fast path. */
  readonly recent: (ChamberSolver | null)[];
  readonly values: Float64Array;
  readonly scratch: Float64Array;
  readonly centreMad: Float64Array;
  readonly fit: Float64Array;
  readonly usable: Uint8Array;
  readonly attribution: ChamberAttribution;
  readonly result: RingAnalysis;
}

const RECENT_PER_BIN = 4;

/** Checks a unit configuration for what the analysis needs; throws an Error that names every problem. */
export function assertUnitConfig(config: UnitConfig): void {
  const problems = checkUnitConfig(config);
  if (problems.length) throw new Error(problems.map((p) => `${p.field} ${p.reason}`).join('; '));
}

/** Allocates an empty analysis result sized for the context (for `analyseRing(ctx, r, L, out)`). */
export function createRingAnalysis(m: number, n: number): RingAnalysis {
  return {
    thermocoupleCount: m,
    chamberCount: n,
    loadFraction: NaN,
    swirlDeg: NaN,
    validity: new Uint8Array(m),
    deviationDegC: new Float64Array(m),
    spread: emptySpread(),
    coverage: { validCount: 0, total: m, fraction: 0, longestInvalidRun: 0, degraded: false, reason: 'ok' },
    chamberDeviationDegC: new Float64Array(n),
    chamberUncertaintyDegC: new Float64Array(n),
    ringLevelDegC: NaN,
    fitResidualSdDegC: NaN,
    worstChamber: null,
    worstChamberLikelihood: NaN,
    runnerUpChamber: null,
    runnerUpLikelihood: NaN,
    coldestChamber: null,
    hottestChamber: null,
  };
}

/** Prepares a unit for ring analysis. Throws when the configuration cannot be analysed. */
export function prepareUnit(config: UnitConfig, options: AnalysisOptionsInput = {}): UnitContext {
  assertUnitConfig(config);
  const opts = resolveAnalysisOptions(options);
  const m = config.thermocouples.count;
  const n = config.chambers.count;
  const tc = thermocoupleAnglesDeg(config);
  const ch = chamberAnglesDeg(config);
  const pitch = chamberPitchDeg(config);
  const kernel: KernelSpec = { shape: opts.kernel, widthDeg: opts.plumeWidthFraction * pitch };
  const responseLeft = new Float64Array(m);
  const responseRight = new Float64Array(m);
  const loneShareLeft = new Float64Array(m);
  const loneShareRight = new Float64Array(m);
  const narrow: KernelSpec = { shape: opts.kernel, widthDeg: Math.min(opts.plumeWidthFraction, opts.loneSensorNarrowestPlumeFraction) * pitch };
  for (let i = 0; i < m; i++) {
    responseLeft[i] = m > 1 ? plumeKernel(arcDistanceDeg(tc[i], tc[(i - 1 + m) % m]), kernel) : 0;
    responseRight[i] = m > 1 ? plumeKernel(arcDistanceDeg(tc[i], tc[(i + 1) % m]), kernel) : 0;
    loneShareLeft[i] = m > 1 ? plumeKernel(arcDistanceDeg(tc[i], tc[(i - 1 + m) % m]), narrow) : 0;
    loneShareRight[i] = m > 1 ? plumeKernel(arcDistanceDeg(tc[i], tc[(i + 1) % m]), narrow) : 0;
  }
  const curve = config.swirl.curve;
  const loadMin = curve[0][0];
  const loadMax = curve[curve.length - 1][0];
  const binCount = Math.max(1, Math.round((loadMax - loadMin) / opts.loadBinWidth) + 1);
  const binSwirlDeg = new Float64Array(binCount);
  for (let b = 0; b < binCount; b++) binSwirlDeg[b] = swirlDeg(curve, binCount === 1 ? loadMin : Math.min(loadMin + b * opts.loadBinWidth, loadMax));
  return {
    config,
    options: opts,
    m,
    n,
    tcAnglesDeg: tc,
    chamberAnglesDeg: ch,
    chamberPitchDeg: pitch,
    kernel,
    responseLeft,
    responseRight,
    loneShareLeft,
    loneShareRight,
    loadMin,
    loadMax,
    binCount,
    binSwirlDeg,
    binResponse: new Array<Float64Array | null>(binCount).fill(null),
    solversBuilt: 0,
    cache: new Map(),
    recent: new Array<ChamberSolver | null>(binCount * RECENT_PER_BIN).fill(null),
    values: new Float64Array(m),
    scratch: new Float64Array(2 * m),
    centreMad: new Float64Array(2),
    fit: new Float64Array(n + 1),
    usable: new Uint8Array(m),
    attribution: { chamber: 0, likelihood: NaN, runnerUpChamber: null, runnerUpLikelihood: NaN },
    result: createRingAnalysis(m, n),
  };
}

/** Load bin index for load fraction L: the curve range split in loadBinWidth steps, clamped. */
export function loadBinOf(ctx: UnitContext, loadFraction: number): number {
  if (!Number.isFinite(loadFraction) || ctx.binCount === 1) return 0;
  const b = Math.round((loadFraction - ctx.loadMin) / ctx.options.loadBinWidth);
  return b < 0 ? 0 : b >= ctx.binCount ? ctx.binCount - 1 : b;
}

/** Load fraction at the centre of a bin. */
export function loadOfBin(ctx: UnitContext, bin: number): number {
  return ctx.binCount === 1 ? ctx.loadMin : Math.min(ctx.loadMin + bin * ctx.options.loadBinWidth, ctx.loadMax);
}

/**
 * The plume kernel's response of every chamber at every thermocouple at a load: M × N row-major,
 * element i·N + k is how much of chamber k's plume (relative to its peak) thermocouple i sees at
 * the swirl of the load's bin. Built once per bin and kept; do not modify.
 */
export function plumeResponseAt(ctx: UnitContext, loadFraction: number): Float64Array {
  const bin = loadBinOf(ctx, loadFraction);
  let r = ctx.binResponse[bin];
  if (!r) {
    const { m, n } = ctx;
    r = new Float64Array(m * n);
    const shift = ctx.config.swirl.sense * ctx.binSwirlDeg[bin];
    for (let i = 0; i < m; i++) for (let k = 0; k < n; k++) r[i * n + k] = plumeKernel(ctx.tcAnglesDeg[i] - ctx.chamberAnglesDeg[k] - shift, ctx.kernel);
    ctx.binResponse[bin] = r;
  }
  return r;
}

/** The chamber solver for (bin, usable mask): from the recent slots, the cache, or built anew. */
export function solverFor(ctx: UnitContext, bin: number, usable: Uint8Array, maskLo = -1, maskHi = -1): ChamberSolver {
  let lo = maskLo;
  let hi = maskHi;
  if (lo < 0 || hi < 0) {
    lo = 0;
    hi = 0;
    for (let i = 0; i < ctx.m; i++) {
      if (!usable[i]) continue;
      if (i < 32) lo = (lo | (1 << i)) >>> 0;
      else hi = (hi | (1 << (i - 32))) >>> 0;
    }
  }
  const base = bin * RECENT_PER_BIN;
  for (let s = 0; s < RECENT_PER_BIN; s++) {
    const e = ctx.recent[base + s];
    if (e !== null && e.maskLo === lo && e.maskHi === hi) return e;
  }
  const key = `${bin}:${hi}:${lo}`;
  let solver = ctx.cache.get(key);
  if (solver) {
    ctx.cache.delete(key);
    ctx.cache.set(key, solver);
  } else {
    const shift = ctx.config.swirl.sense * ctx.binSwirlDeg[bin];
    solver = buildChamberSolver(ctx.tcAnglesDeg, ctx.chamberAnglesDeg, shift, usable, ctx.kernel, ctx.options.ridgeFraction, ctx.options.plumeCoverResponse);
    solver.bin = bin;
    ctx.solversBuilt++;
    ctx.cache.set(key, solver);
    while (ctx.cache.size > Math.max(1, ctx.options.maxCachedSolvers)) {
      const oldest = ctx.cache.keys().next().value as string;
      ctx.cache.delete(oldest);
    }
  }
  for (let s = RECENT_PER_BIN - 1; s > 0; s--) ctx.recent[base + s] = ctx.recent[base + s - 1];
  ctx.recent[base] = solver;
  return solver;
}

/**
 * Analyses one ring: validity (missing, out of range, isolated outlier), coverage, spread over
 * valid readings, chamber estimates with uncertainties, and the worst chamber with its
 * runner-up. readingsDegC[i] is thermocouple i+1 in °C (null/NaN when missing); loadFraction is
 * the corrected load. windowCodes, when given, holds per thermocouple the verdict of the window
 * tests over the recent rings (VALIDITY.frozen, .erratic, .drifting_alone, or valid): a reading
 * the window tests condemned is excluded from the spread and the chamber map like any other
 * invalid reading (a frozen or erratic sensor otherwise paints a false plume), and keeps that
 * code unless it is also missing or out of range. Writes into out (default: the context's own
 * result object) and returns it. Never throws on bad readings.
 */
export function analyseRing(
  ctx: UnitContext,
  readingsDegC: ArrayLike<Reading>,
  loadFraction: number,
  out: RingAnalysis = ctx.result,
  windowCodes?: ArrayLike<number>,
): RingAnalysis {
  const { m, n, values, scratch, usable } = ctx;
  const vo = ctx.options.validity;
  const codes = out.validity;
  classifyMissingAndRange(readingsDegC, m, vo.floorDegC, vo.ceilingDegC, codes, values);
  if (windowCodes) {
    for (let i = 0; i < m && i < windowCodes.length; i++) {
      const w = windowCodes[i];
      if (codes[i] === VALIDITY.valid && w !== VALIDITY.valid && w !== undefined) {
        codes[i] = w;
        values[i] = NaN;
      }
    }
  }
  // Median of the valid readings; the MAD only when some reading is far enough out to be a candidate.
  let nv = 0;
  for (let i = 0; i < m; i++) if (codes[i] === VALIDITY.valid) scratch[nv++] = values[i];
  sortPrefixInPlace(scratch, nv);
  const med = medianOfSorted(scratch, nv);
  let outliers = 0;
  if (nv > 0 && (scratch[nv - 1] - med > vo.outlierMinDegC || med - scratch[0] > vo.outlierMinDegC)) {
    const madDegC = madOfSorted(scratch, nv, med);
    outliers = markIsolatedOutliers(values, codes, m, med, madDegC, ctx.responseLeft, ctx.responseRight, vo);
  }
  const spread = spreadInto(values, codes, m, scratch, out.spread, outliers === 0 ? med : NaN);
  const centre = spread.robustCentreDegC;
  // The usable-thermocouple mask, as bits, is the solver cache's key (built in the same pass).
  let maskLo = 0;
  let maskHi = 0;
  for (let i = 0; i < m; i++) {
    const ok = codes[i] === VALIDITY.valid;
    usable[i] = ok ? 1 : 0;
    out.deviationDegC[i] = ok ? values[i] - centre : NaN;
    if (ok) {
      if (i < 32) maskLo = (maskLo | (1 << i)) >>> 0;
      else maskHi = (maskHi | (1 << (i - 32))) >>> 0;
    }
  }
  coverageInto(codes, m, ctx.options.coverage, out.coverage);
  out.loadFraction = loadFraction;
  const bin = loadBinOf(ctx, loadFraction);
  out.swirlDeg = ctx.binSwirlDeg[bin];
  if (spread.validCount < ctx.options.minValidForChambers) {
    clearChambers(out, n);
    return out;
  }
  const solver = solverFor(ctx, bin, usable, maskLo, maskHi);
  estimateChambers(solver, values, centre, ctx.options.residualFloorDegC, ctx.scratch, ctx.fit, out);
  let worst = -1;
  let worstAbs = -1;
  let cold = -1;
  let hot = -1;
  const dev = out.chamberDeviationDegC;
  for (let k = 0; k < n; k++) {
    const v = dev[k];
    if (!(v === v)) continue; // not observable
    if (Math.abs(v) > worstAbs) {
      worstAbs = Math.abs(v);
      worst = k;
    }
    if (cold < 0 || v < dev[cold]) cold = k;
    if (hot < 0 || v > dev[hot]) hot = k;
  }
  if (worst < 0) {
    clearChambers(out, n);
    return out;
  }
  const a = attributeChamber(dev, worst, ctx.chamberPitchDeg, ctx.options.swirlUncertaintyDeg, ctx.attribution);
  out.worstChamber = a.chamber;
  out.worstChamberLikelihood = a.likelihood;
  out.runnerUpChamber = a.runnerUpChamber;
  out.runnerUpLikelihood = a.runnerUpLikelihood;
  out.coldestChamber = cold + 1;
  out.hottestChamber = hot + 1;
  return out;
}

function clearChambers(out: RingAnalysis, n: number): void {
  for (let k = 0; k < n; k++) {
    out.chamberDeviationDegC[k] = NaN;
    out.chamberUncertaintyDegC[k] = NaN;
  }
  out.ringLevelDegC = NaN;
  out.fitResidualSdDegC = NaN;
  out.worstChamber = null;
  out.worstChamberLikelihood = NaN;
  out.runnerUpChamber = null;
  out.runnerUpLikelihood = NaN;
  out.coldestChamber = null;
  out.hottestChamber = null;
}

/** Why a chamber has no estimate, in the words the API, the pictures and the review use. */
export const NOT_OBSERVABLE = {
  tooFewProbes: 'not observable: too few valid thermocouples to map the chambers',
  noProbeUnderPlume: 'not observable: no valid thermocouple under its plume at this load',
} as const;

/**
 * Why chamber k (from 0) of an analysis has no estimate, null when it has one: every chamber
 * without one (too few valid thermocouples for a map), or this one alone (its plume covers no
 * valid thermocouple at the ring's swirl, AnalysisOptions.plumeCoverResponse). Reads the stored
 * form as well (null for NaN).
 */
export function chamberNotObservableReason(chamberDeviationDegC: ArrayLike<number | null>, k: number): string | null {
  const v = chamberDeviationDegC[k];
  if (typeof v === 'number' && Number.isFinite(v)) return null;
  for (let j = 0; j < chamberDeviationDegC.length; j++) {
    const w = chamberDeviationDegC[j];
    if (typeof w === 'number' && Number.isFinite(w)) return NOT_OBSERVABLE.noProbeUnderPlume;
  }
  return NOT_OBSERVABLE.tooFewProbes;
}

/** Chambers (numbered from 1) of an analysis with no estimate while others have one: blind behind failed probes. */
export function blindChambers(chamberDeviationDegC: ArrayLike<number | null>): number[] {
  const out: number[] = [];
  let any = false;
  for (let k = 0; k < chamberDeviationDegC.length; k++) {
    const v = chamberDeviationDegC[k];
    if (typeof v === 'number' && Number.isFinite(v)) any = true;
    else out.push(k + 1);
  }
  return any ? out : [];
}

/** A deep copy of an analysis result (typed arrays copied). */
export function copyRingAnalysis(a: RingAnalysis): RingAnalysis {
  return {
    ...a,
    validity: a.validity.slice(),
    deviationDegC: a.deviationDegC.slice(),
    spread: { ...a.spread },
    coverage: { ...a.coverage },
    chamberDeviationDegC: a.chamberDeviationDegC.slice(),
    chamberUncertaintyDegC: a.chamberUncertaintyDegC.slice(),
  };
}

/** Plain-JSON form of an analysis: numbers from 1, reason names, NaN as null. */
export interface RingAnalysisJson {
  loadFraction: number | null;
  swirlDeg: number | null;
  spreadDegC: number | null;
  spreadExcl1DegC: number | null;
  spreadExcl2DegC: number | null;
  meanDegC: number | null;
  robustCentreDegC: number | null;
  stdDevDegC: number | null;
  hottestThermocouple: number | null;
  coldestThermocouple: number | null;
  secondColdestThermocouple: number | null;
  coldestAdjacent: boolean;
  coverage: Coverage;
  invalid: { thermocouple: number; reason: ValidityReason }[];
  deviationDegC: (number | null)[];
  /** observable false: deviation and uncertainty are null and notObservableReason says why. */
  chambers: { chamber: number; deviationDegC: number | null; uncertaintyDegC: number | null; observable: boolean; notObservableReason: string | null }[];
  ringLevelDegC: number | null;
  fitResidualSdDegC: number | null;
  worstChamber: number | null;
  worstChamberLikelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
}

function num(v: number): number | null {
  return Number.isFinite(v) ? v : null;
}

/** Converts an analysis into the plain JSON shape stored and served. */
export function ringAnalysisToJson(a: RingAnalysis): RingAnalysisJson {
  const invalid: { thermocouple: number; reason: ValidityReason }[] = [];
  for (let i = 0; i < a.thermocoupleCount; i++) if (a.validity[i] !== VALIDITY.valid) invalid.push({ thermocouple: i + 1, reason: VALIDITY_REASONS[a.validity[i]] });
  const chambers = [];
  for (let k = 0; k < a.chamberCount; k++) {
    const why = chamberNotObservableReason(a.chamberDeviationDegC, k);
    chambers.push({ chamber: k + 1, deviationDegC: num(a.chamberDeviationDegC[k]), uncertaintyDegC: why ? null : num(a.chamberUncertaintyDegC[k]), observable: why === null, notObservableReason: why });
  }
  const s = a.spread;
  return {
    loadFraction: num(a.loadFraction),
    swirlDeg: num(a.swirlDeg),
    spreadDegC: num(s.spreadDegC),
    spreadExcl1DegC: num(s.spreadExcl1DegC),
    spreadExcl2DegC: num(s.spreadExcl2DegC),
    meanDegC: num(s.meanDegC),
    robustCentreDegC: num(s.robustCentreDegC),
    stdDevDegC: num(s.stdDevDegC),
    hottestThermocouple: s.hottestThermocouple,
    coldestThermocouple: s.coldestThermocouple,
    secondColdestThermocouple: s.secondColdestThermocouple,
    coldestAdjacent: s.coldestAdjacent,
    coverage: { ...a.coverage },
    invalid,
    deviationDegC: Array.from(a.deviationDegC, num),
    chambers,
    ringLevelDegC: num(a.ringLevelDegC),
    fitResidualSdDegC: num(a.fitResidualSdDegC),
    worstChamber: a.worstChamber,
    worstChamberLikelihood: num(a.worstChamberLikelihood),
    runnerUpChamber: a.runnerUpChamber,
    runnerUpLikelihood: num(a.runnerUpLikelihood),
  };
}

/** Departures of one analysed ring from the unit's baseline at its load. */
export interface BaselineResiduals {
  /** Per thermocouple: its deviation less its own normal at this load (NaN: invalid, or no normal here). */
  thermocoupleDegC: Float64Array;
  /**
   * Per chamber: the chamber map of that pattern, without the thermocouple that departs alone,
   * less the chambers' common mode (null: too few thermocouples with a residual).
   */
  chamberDegC: Float64Array | null;
  /**
   * What the chambers share, removed from chamberDegC: the median of the mapped chamber
   * departures, °C (NaN without a map). The map gives departures from the average chamber, so
   * one chamber going cold by D lifts the other N − 1 by D/N each; their median takes that
   * back, so healthy chambers stay at their noise while one chamber goes cold.
   */
  chamberCommonModeDegC: number;
  /** One-σ uncertainty of each chamber residual, from how well the map fits the departures, °C. */
  chamberUncertaintyDegC: Float64Array | null;
  /**
   * A thermocouple at least `loneSensorMinDegC` from its normal while its neighbours hold
   * (validity.ts loneThermocouple), numbered from 1: a sensor's error, which the chamber map
   * would otherwise spread over the chambers near it as cold and hot plumes.
   */
  lone: { thermocouple: number; residualDegC: number } | null;
}

/**
 * Buffers for `baselineResidualsInto`, sized for one unit context: the results (thermocouple
 * and chamber residuals) and the working arrays, so a ring's residuals allocate nothing.
 */
export interface ResidualBuffers {
  readonly thermocoupleDegC: Float64Array;
  readonly chamberDegC: Float64Array;
  readonly chamberUncertaintyDegC: Float64Array;
  readonly apart: Float64Array;
  readonly finite: Float64Array;
  readonly mapped: Float64Array;
  readonly usable: Uint8Array;
  readonly values: Float64Array;
  readonly scratch: Float64Array;
  readonly fit: Float64Array;
  readonly chamberSorted: Float64Array;
}

export function createResidualBuffers(m: number, n: number): ResidualBuffers {
  return {
    thermocoupleDegC: new Float64Array(m),
    chamberDegC: new Float64Array(n),
    chamberUncertaintyDegC: new Float64Array(n),
    apart: new Float64Array(m),
    finite: new Float64Array(m),
    mapped: new Float64Array(m),
    usable: new Uint8Array(m),
    values: new Float64Array(m),
    scratch: new Float64Array(m),
    fit: new Float64Array(n + 1),
    chamberSorted: new Float64Array(n),
  };
}

/** A copy of the parts of a ring analysis a baseline needs. */
export function baselineSampleFromAnalysis(a: RingAnalysis): BaselineSample {
  return {
    loadFraction: a.loadFraction,
    ringMeanDegC: a.spread.meanDegC,
    spreadDegC: a.spread.spreadDegC,
    thermocoupleDeviationDegC: a.deviationDegC.slice(),
    chamberDeviationDegC: a.chamberDeviationDegC.slice(),
  };
}

/** The ring's departures from the baseline: thermocouple residuals, a lone one, and their chamber map. */
export function baselineResiduals(ctx: UnitContext, a: RingAnalysis, baseline: UnitBaseline): BaselineResiduals {
  return baselineResidualsInto(ctx, a, baseline, createResidualBuffers(ctx.m, ctx.n));
}

/**
 * baselineResiduals written into `buf`: the arrays of the result are buf's own, valid until the
 * next call with the same buffers (copy them to keep them).
 */
export function baselineResidualsInto(ctx: UnitContext, a: RingAnalysis, baseline: UnitBaseline, buf: ResidualBuffers, probeOffsetsDegC: ArrayLike<number> | null = null): BaselineResiduals {
  const m = ctx.m;
  const tc = buf.thermocoupleDegC;
  const L = a.loadFraction;
  for (let i = 0; i < m; i++) {
    const bt = baseline.thermocouples[i];
    const median = bt ? baselineMedianAt(bt, L) : NaN;
    tc[i] = median === median ? a.deviationDegC[i] - median : NaN;
  }
  // A replaced probe reads with its own offset, learnt against this baseline: taken off its
  // residual (NaN while not learnt: the probe is not judged against its normal meanwhile).
  if (probeOffsetsDegC) for (let i = 0; i < m; i++) if (probeOffsetsDegC[i] !== 0) tc[i] -= probeOffsetsDegC[i];
  // The lone test looks at departures from the ring's common departure (their median): one
  // probe reading low pulls the ring's centre, and so every other probe's residual, up a little.
  const finite = buf.finite;
  let nf = 0;
  for (let i = 0; i < m; i++) if (Number.isFinite(tc[i])) finite[nf++] = tc[i];
  sortPrefixInPlace(finite, nf);
  const common = nf ? medianOfSorted(finite, nf) : 0;
  const apart = buf.apart;
  for (let i = 0; i < m; i++) apart[i] = tc[i] - common;
  const found = loneThermocouple(apart, m, ctx.loneShareLeft, ctx.loneShareRight, ctx.options.loneSensorMinDegC, 0.5, ctx.options.loneSensorNoiseDegC, ctx.options.loneSensorMaxDegC, ctx.options.loneSensorMinShareOfLargest);
  const lone = found ? { index: found.index, value: tc[found.index] } : null;
  let mapped: Float64Array = tc;
  if (lone) {
    mapped = buf.mapped;
    mapped.set(tc);
    mapped[lone.index] = NaN;
  }
  const map = chamberMapInto(ctx, a.loadFraction, mapped, buf);
  const chamberCommon = map ? removeMedianInPlace(buf.chamberDegC, ctx.n, buf.chamberSorted) : NaN;
  return {
    thermocoupleDegC: tc,
    chamberDegC: map ? buf.chamberDegC : null,
    chamberCommonModeDegC: chamberCommon,
    chamberUncertaintyDegC: map ? buf.chamberUncertaintyDegC : null,
    lone: lone ? { thermocouple: lone.index + 1, residualDegC: lone.value } : null,
  };
}

/** Subtracts the median of the finite values of v[0..n) from each (using `sorted` as room); returns the median (NaN: none finite, v unchanged). */
function removeMedianInPlace(v: Float64Array, n: number, sorted: Float64Array): number {
  let nf = 0;
  for (let k = 0; k < n; k++) if (Number.isFinite(v[k])) sorted[nf++] = v[k];
  if (nf === 0) return NaN;
  sortPrefixInPlace(sorted, nf);
  const med = medianOfSorted(sorted, nf);
  for (let k = 0; k < n; k++) v[k] -= med;
  return med;
}

/**
 * Chamber residuals from thermocouple residuals: `tcResidualDegC[i]` is thermocouple i's
 * deviation less its own normal at this load (NaN where it has none or is not usable); the
 * result is what the chamber map makes of that pattern, through the solver of the ring's load
 * bin for the thermocouples that have a residual. A healthy chamber's residual stays near zero
 * whichever thermocouples are usable: leaving a failed or condemned thermocouple out changes
 * how the ring's built-in asymmetry is mapped (so a chamber map less a chamber baseline fitted
 * with every thermocouple would move by degrees), but not how departures from normal are.
 * Returns the chamber residuals with their uncertainties (the ring level is the departures'
 * common part), or null when fewer than minValidForChambers thermocouples have a residual.
 */
export function chamberResidualsFromThermocouples(ctx: UnitContext, loadFraction: number, tcResidualDegC: ArrayLike<number>): ChamberEstimateOut | null {
  return chamberMapInto(ctx, loadFraction, tcResidualDegC, createResidualBuffers(ctx.m, ctx.n));
}

/** chamberResidualsFromThermocouples into `buf` (the result's arrays are buf's chamber arrays). */
function chamberMapInto(ctx: UnitContext, loadFraction: number, tcResidualDegC: ArrayLike<number>, buf: ResidualBuffers): ChamberEstimateOut | null {
  const m = ctx.m;
  const { usable, values } = buf;
  let count = 0;
  for (let i = 0; i < m; i++) {
    const v = tcResidualDegC[i];
    if (Number.isFinite(v)) {
      usable[i] = 1;
      values[i] = v;
      count++;
    } else {
      usable[i] = 0;
      values[i] = 0;
    }
  }
  if (count < ctx.options.minValidForChambers) return null;
  const solver = solverFor(ctx, loadBinOf(ctx, loadFraction), usable);
  const out = { chamberDeviationDegC: buf.chamberDegC, chamberUncertaintyDegC: buf.chamberUncertaintyDegC, ringLevelDegC: NaN, fitResidualSdDegC: NaN };
  estimateChambers(solver, values, 0, ctx.options.residualFloorDegC, buf.scratch, buf.fit, out);
  return out;
}
