/**
 * Is a reading valid? Per ring (missing, out of range, isolated outlier by the neighbour test)
 * and over a window of rings (frozen, erratic, drifting alone), each with its reason code;
 * and coverage (valid / total, adjacent failures) as its own result. Invalid readings are
 * excluded downstream, never replaced. The per-ring functions write into caller-owned typed
 * arrays so the ring hot path does not allocate.
 */
import { ringNeighbours } from './geometry.ts';
import { linearRegression } from './regression.ts';
import { MAD_TO_SIGMA, madOfSorted, medianOfSorted, sortPrefixInPlace } from './stats.ts';
import { VALIDITY, VALIDITY_REASONS, type Reading, type ValidityReason } from './types.ts';

export interface ValidityOptions {
  /** Readings below this are out of range (open circuits read far below any fired exhaust), °C. */
  floorDegC: number;
  /** Readings above this are out of range (a fired exhaust above ~750 °C is implausible), °C. */
  ceilingDegC: number;
  /** A reading is a candidate outlier when |x − median| > outlierZ · max(1.4826·MAD, scaleFloorDegC)… */
  outlierZ: number;
  /** …and also more than this many °C from the median. */
  outlierMinDegC: number;
  /** Floor on the robust σ used by the outlier test, °C (keeps a very uniform ring from flagging noise). */
  scaleFloorDegC: number;
  /**
   * A neighbour "shares" the deviation when it has the same sign and at least this fraction of
   * the deviation a plume centred on the candidate would give it (kernel response × deviation).
   */
  neighbourShareFraction: number;
  /** …and at least this many °C (so noise alone does not count as sharing). */
  neighbourShareMinDegC: number;
  /**
   * Below this kernel response at the neighbour's angle, a plume can sit on one thermocouple
   * alone and isolation cannot be decided from one ring, only over time (by the window tests:
   * the reading does not move with load like its neighbours'). With the default plume width this is the case for one thermocouple per chamber.
   */
  minNeighbourResponse: number;
}

/**
 * Defaults. The floor and ceiling follow the trade's rule of thumb (common practice); the
 * outlier levels are engineering judgement, chosen above the healthy spread of 15–45 °C
 * (common practice) so a normal ring never trips them.
 */
export const defaultValidityOptions: ValidityOptions = {
  floorDegC: 100,
  ceilingDegC: 750,
  outlierZ: 5,
  outlierMinDegC: 40,
  scaleFloorDegC: 5,
  neighbourShareFraction: 0.5,
  neighbourShareMinDegC: 5,
  minNeighbourResponse: 0.2,
};

/** True for a finite number. */
export function isPresent(r: Reading): r is number {
  return typeof r === 'number' && Number.isFinite(r);
}

/**
 * Steps 1–2 of the validity test: missing (null, undefined, NaN, ±Infinity) and out of range.
 * Writes a code per thermocouple and the usable value (NaN otherwise); returns the valid count.
 */
export function classifyMissingAndRange(
  readings: ArrayLike<Reading>,
  m: number,
  floorDegC: number,
  ceilingDegC: number,
  codes: Uint8Array,
  values: Float64Array,
): number {
  let nv = 0;
  for (let i = 0; i < m; i++) {
    const r = i < readings.length ? readings[i] : undefined;
    if (typeof r !== 'number' || r !== r || r === Infinity || r === -Infinity) {
      codes[i] = VALIDITY.missing;
      values[i] = NaN;
    } else if (r < floorDegC || r > ceilingDegC) {
      codes[i] = VALIDITY.out_of_range;
      values[i] = NaN;
    } else {
      codes[i] = VALIDITY.valid;
      values[i] = r;
      nv++;
    }
  }
  return nv;
}

/** Median and MAD of the valid values, using scratch (length ≥ m). Writes [median, mad] into out; returns the valid count. */
export function robustCentreInto(values: Float64Array, codes: Uint8Array, m: number, scratch: Float64Array, out: Float64Array): number {
  let n = 0;
  for (let i = 0; i < m; i++) if (codes[i] === VALIDITY.valid) scratch[n++] = values[i];
  sortPrefixInPlace(scratch, n);
  const med = medianOfSorted(scratch, n);
  out[0] = med;
  out[1] = madOfSorted(scratch, n, med);
  return n;
}

/**
 * Step 3: isolated outliers. Candidate when |dᵢ| > max(z·max(1.4826·MAD, floor), minDegC), with
 * dᵢ = xᵢ − median; isolated when neither valid neighbour j has the same sign and
 * |dⱼ| ≥ max(shareFraction · rⱼ · |dᵢ|, shareMinDegC), rⱼ the plume kernel's response at j for a
 * plume centred on i. Skipped for thermocouples whose neighbour response is below the
 * configured minimum (isolation then needs a window). Returns how many were marked.
 */
export function markIsolatedOutliers(
  values: Float64Array,
  codes: Uint8Array,
  m: number,
  medianDegC: number,
  madDegC: number,
  responseLeft: Float64Array,
  responseRight: Float64Array,
  opts: ValidityOptions,
): number {
  if (m < 3 || !Number.isFinite(medianDegC)) return 0;
  const sigma = Math.max(MAD_TO_SIGMA * madDegC, opts.scaleFloorDegC);
  const limit = Math.max(opts.outlierZ * sigma, opts.outlierMinDegC);
  let marked = 0;
  for (let i = 0; i < m; i++) {
    if (codes[i] !== VALIDITY.valid) continue;
    const d = values[i] - medianDegC;
    if (!(Math.abs(d) > limit)) continue;
    const rl = responseLeft[i];
    const rr = responseRight[i];
    if (rl < opts.minNeighbourResponse && rr < opts.minNeighbourResponse) continue;
    const l = (i - 1 + m) % m;
    const r = (i + 1) % m;
    if (sharesDeviation(values[l] - medianDegC, d, rl, opts) || sharesDeviation(values[r] - medianDegC, d, rr, opts)) continue;
    codes[i] = VALIDITY.isolated_outlier;
    marked++;
  }
  return marked;
}

/** Whether a neighbour's deviation dj shares the sign and a part of the candidate's deviation d. */
function sharesDeviation(dj: number, d: number, response: number, opts: ValidityOptions): boolean {
  if (!Number.isFinite(dj) || dj * d <= 0) return false;
  return Math.abs(dj) >= Math.max(opts.neighbourShareFraction * response * Math.abs(d), opts.neighbourShareMinDegC);
}

export interface CoverageOptions {
  /** Fewer valid thermocouples than this fraction is degraded coverage. */
  minValidFraction: number;
  /** This many adjacent failed thermocouples (or more) is degraded coverage. */
  maxAdjacentInvalid: number;
}

/**
 * Defaults: coverage is degraded with fewer than 75 % of the thermocouples valid, or two adjacent
 * ones failed (a chamber can hide behind dead sensors).
 */
export const defaultCoverageOptions: CoverageOptions = { minValidFraction: 0.75, maxAdjacentInvalid: 2 };

export type CoverageReason = 'ok' | 'too_few_valid' | 'adjacent_failed' | 'no_valid';

export interface Coverage {
  validCount: number;
  total: number;
  /** valid / total. */
  fraction: number;
  /** Longest run of adjacent invalid thermocouples around the ring. */
  longestInvalidRun: number;
  degraded: boolean;
  reason: CoverageReason;
}

/** Longest circular run of codes ≠ valid. All invalid → m. */
export function longestInvalidRun(codes: ArrayLike<number>, m: number): number {
  let start = -1;
  for (let i = 0; i < m; i++) {
    if (codes[i] === VALIDITY.valid) {
      start = i;
      break;
    }
  }
  if (start < 0) return m;
  let best = 0;
  let run = 0;
  for (let s = 1; s <= m; s++) {
    const i = (start + s) % m;
    if (codes[i] !== VALIDITY.valid) {
      run++;
      if (run > best) best = run;
    } else run = 0;
  }
  return best;
}

/** Coverage of a ring from its validity codes. Writes into out (reused) and returns it. */
export function coverageInto(codes: ArrayLike<number>, m: number, opts: CoverageOptions, out: Coverage): Coverage {
  let nv = 0;
  for (let i = 0; i < m; i++) if (codes[i] === VALIDITY.valid) nv++;
  const run = nv === m ? 0 : longestInvalidRun(codes, m);
  out.validCount = nv;
  out.total = m;
  out.fraction = m > 0 ? nv / m : 0;
  out.longestInvalidRun = run;
  if (nv === 0) out.reason = 'no_valid';
  else if (out.fraction < opts.minValidFraction) out.reason = 'too_few_valid';
  else if (run >= opts.maxAdjacentInvalid) out.reason = 'adjacent_failed';
  else out.reason = 'ok';
  out.degraded = out.reason !== 'ok';
  return out;
}

/** Coverage of a ring from its validity codes (allocating form). */
export function coverage(codes: ArrayLike<number>, opts: CoverageOptions = defaultCoverageOptions): Coverage {
  return coverageInto(codes, codes.length, opts, { validCount: 0, total: 0, fraction: 0, longestInvalidRun: 0, degraded: false, reason: 'ok' });
}

export interface WindowValidityOptions {
  /** Need at least this many usable rings in the window to judge. */
  minRings: number;
  /** Frozen: the reading's range over the window at most this, °C… */
  frozenMaxRangeDegC: number;
  /** …while the ring mean moved by at least this, °C… */
  frozenMinRingMoveDegC: number;
  /**
   * …or while both ring neighbours' readings ranged over at least this, °C. A live probe's
   * reading always moves by some tenths (noise, small changes of the gas), so at steady base
   * load, when the ring mean hardly moves, a reading stuck to the hundredth beside neighbours
   * that move by a degree is a frozen value (a failed transmitter, a stale gateway register).
   */
  frozenNeighbourMinRangeDegC: number;
  /**
   * Erratic: typical sample-to-sample change of its residual (the median |change| / 0.6745, the
   * RMS it would have if the changes were normal, so one jump does not count: a lost flame
   * under a narrow plume moves its probe by 200 °C once) above this multiple of its neighbours'…
   */
  erraticRatio: number;
  /** …and above this, °C. */
  erraticMinDegC: number;
  /**
   * Drifting alone: its residual's fitted change over the window exceeds this, °C, and is not
   * one step (no single ring-to-ring change is more than half of it: a step on one probe while
   * its neighbours hold is a lost flame under a narrow plume, which the chamber map names, or a
   * sensor's jump, which the per-ring lone-probe test names)…
   */
  driftAloneDegC: number;
  /** …while each neighbour's stays below this fraction of it. */
  driftNeighbourFraction: number;
  /**
   * Drifting alone is judged only while the corrected load held within this span over the
   * window (load fraction), when the caller gives the loads. A load change turns the swirl and
   * moves every chamber's plume round the ring, so a thermocouple on a plume's flank sees its
   * residual change by tens of degrees while a neighbour on the crest or in a trough barely
   * moves: that is the gas, not the sensor. Engineering judgement: 0.03 (3 % of rating) moves a
   * plume by about a degree on the swirl curves seen (tens of degrees over the load range),
   * too little to shift a flank reading by the 15 °C the test needs.
   */
  driftMaxLoadSpan: number;
}

/** Defaults (engineering judgement; tune per fleet). */
export const defaultWindowValidityOptions: WindowValidityOptions = {
  minRings: 10,
  frozenMaxRangeDegC: 0.05,
  frozenMinRingMoveDegC: 3,
  frozenNeighbourMinRangeDegC: 1,
  erraticRatio: 4,
  erraticMinDegC: 3,
  driftAloneDegC: 15,
  driftNeighbourFraction: 0.33,
  driftMaxLoadSpan: 0.03,
};

/** Window verdict for one thermocouple (numbered from 1). */
export interface WindowVerdict {
  thermocouple: number;
  reason: ValidityReason;
  /** Range of its readings, °C; RMS step of its residual, °C; fitted change of its residual over the window, °C. */
  rangeDegC: number;
  stepRmsDegC: number;
  residualChangeDegC: number;
  usableRings: number;
}

/**
 * Window tests over rings in time order (each an array of M readings; out-of-range readings are
 * treated as missing): frozen (no change while the ring mean moves), erratic (residual noise far
 * above both neighbours'), drifting alone (its residual x − ring median changes over the window,
 * its neighbours' do not, and the load held still). timesS, when given, is the time of each ring
 * (else the ring index); loadFractions, when given, the corrected load of each ring (without
 * them the load is taken to have held). The rings should be rings in service: a start or a stop
 * moves every reading by hundreds of degrees for reasons that are not the sensors'.
 */
export function windowValidity(
  rings: ReadonlyArray<ArrayLike<Reading>>,
  m: number,
  range: Pick<ValidityOptions, 'floorDegC' | 'ceilingDegC'> = defaultValidityOptions,
  opts: WindowValidityOptions = defaultWindowValidityOptions,
  timesS?: ArrayLike<number>,
  loadFractions?: ArrayLike<number>,
): WindowVerdict[] {
  const t = rings.length;
  const resid = new Float64Array(t * m).fill(NaN);
  const raw = new Float64Array(t * m).fill(NaN);
  const ringMean = new Float64Array(t).fill(NaN);
  const codes = new Uint8Array(m);
  const vals = new Float64Array(m);
  const scratch = new Float64Array(2 * m);
  const rc = new Float64Array(2);
  for (let r = 0; r < t; r++) {
    classifyMissingAndRange(rings[r], m, range.floorDegC, range.ceilingDegC, codes, vals);
    const n = robustCentreInto(vals, codes, m, scratch, rc);
    if (n === 0) continue;
    let sum = 0;
    for (let i = 0; i < m; i++) {
      if (codes[i] !== VALIDITY.valid) continue;
      sum += vals[i];
      raw[r * m + i] = vals[i];
      resid[r * m + i] = vals[i] - rc[0];
    }
    ringMean[r] = sum / n;
  }
  const rangeDeg = new Float64Array(m);
  const stepRms = new Float64Array(m);
  const stepTypical = new Float64Array(m);
  const stepMax = new Float64Array(m);
  const change = new Float64Array(m);
  const usable = new Uint32Array(m);
  const ringRange = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    let lo = Infinity;
    let hi = -Infinity;
    let mlo = Infinity;
    let mhi = -Infinity;
    let sq = 0;
    let steps = 0;
    let prev = NaN;
    let biggest = 0;
    const absSteps: number[] = [];
    const xs: number[] = [];
    const ys: number[] = [];
    for (let r = 0; r < t; r++) {
      const v = raw[r * m + i];
      if (!Number.isFinite(v)) continue;
      usable[i]++;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
      const mm = ringMean[r];
      if (mm < mlo) mlo = mm;
      if (mm > mhi) mhi = mm;
      const e = resid[r * m + i];
      if (Number.isFinite(prev)) {
        sq += (e - prev) * (e - prev);
        steps++;
        const a = Math.abs(e - prev);
        absSteps.push(a);
        if (a > biggest) biggest = a;
      }
      prev = e;
      xs.push(timesS ? timesS[r] : r);
      ys.push(e);
    }
    rangeDeg[i] = usable[i] > 0 ? hi - lo : NaN;
    ringRange[i] = usable[i] > 0 ? mhi - mlo : NaN;
    stepRms[i] = steps > 0 ? Math.sqrt(sq / steps) : NaN;
    absSteps.sort((p, q) => p - q);
    stepTypical[i] = steps > 0 ? medianOfSorted(absSteps, absSteps.length) / 0.6745 : NaN;
    stepMax[i] = biggest;
    if (xs.length >= 3) {
      const fit = linearRegression(xs, ys);
      change[i] = fit.slope * (xs[xs.length - 1] - xs[0]);
    } else change[i] = NaN;
  }
  let loadLo = Infinity;
  let loadHi = -Infinity;
  if (loadFractions) {
    for (let r = 0; r < t; r++) {
      const L = loadFractions[r];
      if (!Number.isFinite(L) || !Number.isFinite(ringMean[r])) continue;
      if (L < loadLo) loadLo = L;
      if (L > loadHi) loadHi = L;
    }
  }
  const loadHeld = !loadFractions || !(loadHi - loadLo > opts.driftMaxLoadSpan);
  const out: WindowVerdict[] = [];
  for (let i = 0; i < m; i++) {
    const [l, r] = ringNeighbours(i, m);
    let reason: ValidityReason = 'valid';
    if (usable[i] >= opts.minRings) {
      const neighbourStep = Math.max(finiteOr(stepTypical[l], 0), finiteOr(stepTypical[r], 0));
      const neighboursMove = finiteOr(rangeDeg[l], 0) >= opts.frozenNeighbourMinRangeDegC && finiteOr(rangeDeg[r], 0) >= opts.frozenNeighbourMinRangeDegC;
      if (rangeDeg[i] <= opts.frozenMaxRangeDegC && (ringRange[i] >= opts.frozenMinRingMoveDegC || neighboursMove)) reason = 'frozen';
      else if (stepTypical[i] > opts.erraticMinDegC && stepTypical[i] > opts.erraticRatio * neighbourStep) reason = 'erratic';
      else if (
        loadHeld &&
        Math.abs(change[i]) > opts.driftAloneDegC &&
        stepMax[i] <= 0.5 * Math.abs(change[i]) &&
        Math.abs(finiteOr(change[l], 0)) < opts.driftNeighbourFraction * Math.abs(change[i]) &&
        Math.abs(finiteOr(change[r], 0)) < opts.driftNeighbourFraction * Math.abs(change[i])
      )
        reason = 'drifting_alone';
    }
    out.push({ thermocouple: i + 1, reason, rangeDegC: rangeDeg[i], stepRmsDegC: stepRms[i], residualChangeDegC: change[i], usableRings: usable[i] });
  }
  return out;
}

function finiteOr(v: number, fallback: number): number {
  return Number.isFinite(v) ? v : fallback;
}

/** Reason name of a validity code (e.g. 3 → "isolated_outlier"). */
export function validityReason(code: number): ValidityReason {
  return VALIDITY_REASONS[code] ?? 'missing';
}

/**
 * The thermocouple that departs alone. `values` holds one number per thermocouple (a residual
 * against its own normal, or a drift rate; NaN where unknown). Candidates are the values of at
 * least `minMagnitude` (and under `maxMagnitude`), largest first; the first that departs alone
 * is returned: each ring neighbour moved the same way by less than `fraction` of what a
 * chamber's plume peaking on the candidate would put on it (`shareLeft[i]` / `shareRight[i]`:
 * the plume kernel's response at the left / right neighbour of thermocouple i, relative to its
 * peak, for the narrowest plume to be expected). Mixing spreads every chamber's plume onto the
 * next thermocouple by at least that share, wherever the swirl puts it; a failing sensor's error
 * stays on the sensor. A larger departure elsewhere on the ring (a chamber's plume, whose crest
 * and flanks all fail the test) does not hide a lone probe. `noise` is added to what a
 * neighbour may show (its own noise). Candidates under `minShareOfLargest` of the largest
 * finite value are not judged (a deep plume moves the rest of the ring by a few degrees as the
 * load and the ring's centre move with it). A candidate with an unknown neighbour gets no
 * verdict. Null when none departs alone.
 */
export function loneThermocouple(
  values: ArrayLike<number>,
  m: number,
  shareLeft: ArrayLike<number>,
  shareRight: ArrayLike<number>,
  minMagnitude: number,
  fraction = 0.5,
  noise = 0,
  maxMagnitude = Infinity,
  minShareOfLargest = 0,
): { index: number; value: number } | null {
  if (m < 3) return null;
  let largest = 0;
  for (let i = 0; i < m; i++) if (Number.isFinite(values[i]) && Math.abs(values[i]) > largest) largest = Math.abs(values[i]);
  const floor = Math.max(minMagnitude, minShareOfLargest * largest);
  // Candidates largest first, without allocating: each pass takes the largest below the last one.
  let ceiling = Infinity;
  let ceilingIndex = -1;
  for (;;) {
    let best = -1;
    for (let i = 0; i < m; i++) {
      const v = values[i];
      if (!Number.isFinite(v)) continue;
      const a = Math.abs(v);
      if (a < floor || a >= maxMagnitude) continue;
      // Below the last candidate (ties in index order).
      if (a > ceiling || (a === ceiling && i <= ceilingIndex)) continue;
      if (best < 0 || a > Math.abs(values[best])) best = i;
    }
    if (best < 0) return null;
    ceiling = Math.abs(values[best]);
    ceilingIndex = best;
    const [l, r] = ringNeighbours(best, m);
    const v = values[best];
    const sign = v < 0 ? -1 : 1;
    const vl = values[l];
    const vr = values[r];
    if (!Number.isFinite(vl) || !Number.isFinite(vr)) continue;
    const mag = Math.abs(v);
    if (sign * vl >= fraction * shareLeft[best] * mag + noise || sign * vr >= fraction * shareRight[best] * mag + noise) continue;
    return { index: best, value: v };
  }
}
