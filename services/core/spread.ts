/**
 * Exhaust spread over the valid thermocouples of one ring: hottest − coldest, the same without
 * the one or two coldest, ring mean, robust centre, standard deviation, and where the coldest
 * sit. Thermocouples are numbered from 1 in these results (null when there is none).
 */
import { areAdjacent } from './geometry.ts';
import { VALIDITY, type Reading } from './types.ts';
import { medianOfSorted, sortPrefixInPlace } from './stats.ts';

export interface SpreadMetrics {
  /** hottest − coldest, °C (0 with one valid reading, NaN with none). */
  spreadDegC: number;
  /** hottest − second coldest, °C (NaN with fewer than 2 valid). */
  spreadExcl1DegC: number;
  /** hottest − third coldest, °C (NaN with fewer than 3 valid). */
  spreadExcl2DegC: number;
  meanDegC: number;
  /** Median of the valid readings, °C. */
  robustCentreDegC: number;
  /** Sample standard deviation (n − 1), °C. */
  stdDevDegC: number;
  hottestThermocouple: number | null;
  coldestThermocouple: number | null;
  secondColdestThermocouple: number | null;
  thirdColdestThermocouple: number | null;
  /** True when the coldest and second coldest are ring neighbours. */
  coldestAdjacent: boolean;
  validCount: number;
}

/** An empty spread result, for reuse. */
export function emptySpread(): SpreadMetrics {
  return {
    spreadDegC: NaN,
    spreadExcl1DegC: NaN,
    spreadExcl2DegC: NaN,
    meanDegC: NaN,
    robustCentreDegC: NaN,
    stdDevDegC: NaN,
    hottestThermocouple: null,
    coldestThermocouple: null,
    secondColdestThermocouple: null,
    thirdColdestThermocouple: null,
    coldestAdjacent: false,
    validCount: 0,
  };
}

/**
 * Spread metrics over values whose code is valid; scratch (length ≥ m) is used for the median
 * unless knownMedianDegC (the median of exactly these valid values) is given.
 * One pass keeps the hottest and the three coldest; a second gives the standard deviation.
 */
export function spreadInto(values: Float64Array, codes: Uint8Array, m: number, scratch: Float64Array, out: SpreadMetrics, knownMedianDegC = NaN): SpreadMetrics {
  const needMedian = !(knownMedianDegC === knownMedianDegC);
  let n = 0;
  let sum = 0;
  let hot = -Infinity;
  let hotI = -1;
  let c1 = Infinity;
  let c2 = Infinity;
  let c3 = Infinity;
  let i1 = -1;
  let i2 = -1;
  let i3 = -1;
  for (let i = 0; i < m; i++) {
    if (codes[i] !== VALIDITY.valid) continue;
    const v = values[i];
    if (needMedian) scratch[n] = v;
    n++;
    sum += v;
    if (v > hot) {
      hot = v;
      hotI = i;
    }
    if (v < c1) {
      c3 = c2;
      i3 = i2;
      c2 = c1;
      i2 = i1;
      c1 = v;
      i1 = i;
    } else if (v < c2) {
      c3 = c2;
      i3 = i2;
      c2 = v;
      i2 = i;
    } else if (v < c3) {
      c3 = v;
      i3 = i;
    }
  }
  out.validCount = n;
  if (n === 0) {
    out.spreadDegC = out.spreadExcl1DegC = out.spreadExcl2DegC = NaN;
    out.meanDegC = out.robustCentreDegC = out.stdDevDegC = NaN;
    out.hottestThermocouple = out.coldestThermocouple = out.secondColdestThermocouple = out.thirdColdestThermocouple = null;
    out.coldestAdjacent = false;
    return out;
  }
  const mean = sum / n;
  let ss = 0;
  for (let i = 0; i < m; i++) {
    if (codes[i] !== VALIDITY.valid) continue;
    const d = values[i] - mean;
    ss += d * d;
  }
  if (needMedian) sortPrefixInPlace(scratch, n);
  out.spreadDegC = hot - c1;
  out.spreadExcl1DegC = n >= 2 ? hot - c2 : NaN;
  out.spreadExcl2DegC = n >= 3 ? hot - c3 : NaN;
  out.meanDegC = mean;
  out.robustCentreDegC = needMedian ? medianOfSorted(scratch, n) : knownMedianDegC;
  out.stdDevDegC = n >= 2 ? Math.sqrt(ss / (n - 1)) : NaN;
  out.hottestThermocouple = hotI + 1;
  out.coldestThermocouple = i1 + 1;
  out.secondColdestThermocouple = i2 >= 0 ? i2 + 1 : null;
  out.thirdColdestThermocouple = i3 >= 0 ? i3 + 1 : null;
  out.coldestAdjacent = i2 >= 0 && areAdjacent(i1, i2, m);
  return out;
}

/**
 * Spread metrics of a ring where every finite reading counts as valid (allocating form; the
 * ring analysis applies the full validity test first).
 * Example: [500, 520, 510, 480] → spread 40, spreadExcl1 20, spreadExcl2 10, coldest 4.
 */
export function spreadMetrics(readings: ArrayLike<Reading>): SpreadMetrics {
  const m = readings.length;
  const values = new Float64Array(m);
  const codes = new Uint8Array(m);
  for (let i = 0; i < m; i++) {
    const r = readings[i];
    const ok = typeof r === 'number' && Number.isFinite(r);
    values[i] = ok ? (r as number) : NaN;
    codes[i] = ok ? VALIDITY.valid : VALIDITY.missing;
  }
  return spreadInto(values, codes, m, new Float64Array(m), emptySpread());
}
