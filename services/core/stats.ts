/**
 * Small robust statistics used across core: median, MAD, quantiles, and an in-place sort of
 * the first n entries of a typed array (so the ring hot path never allocates).
 * Pure functions; non-finite values are the caller's business unless stated.
 */

/** Scale factor that makes the MAD a consistent estimate of σ for normal data: 1/Φ⁻¹(3/4). */
export const MAD_TO_SIGMA = 1.482602218505602;

/** Sorts the first n entries of buf ascending, in place (insertion sort; n ≤ a few dozen). */
export function sortPrefixInPlace(buf: Float64Array, n: number): void {
  for (let i = 1; i < n; i++) {
    const v = buf[i];
    let j = i - 1;
    while (j >= 0 && buf[j] > v) {
      buf[j + 1] = buf[j];
      j--;
    }
    buf[j + 1] = v;
  }
}

/** Median of the first n entries of an already sorted buffer. NaN when n = 0. */
export function medianOfSorted(sorted: ArrayLike<number>, n: number): number {
  if (n <= 0) return NaN;
  const h = n >> 1;
  return n % 2 === 1 ? sorted[h] : 0.5 * (sorted[h - 1] + sorted[h]);
}

/**
 * MAD (unscaled) of the first n entries of a sorted buffer around its median med, without a
 * second sort: the absolute deviations are two sorted runs (below the median, read downwards;
 * from the median up) merged up to the middle. NaN when n = 0.
 * Example: madOfSorted([1, 2, 3, 4, 100], 5, 3) = 1.
 */
export function madOfSorted(sorted: ArrayLike<number>, n: number, med: number): number {
  if (n <= 0) return NaN;
  let r = 0;
  while (r < n && sorted[r] < med) r++;
  let l = r - 1;
  const h = n >> 1;
  let prev = 0;
  let cur = 0;
  for (let k = 0; k <= h; k++) {
    const dl = l >= 0 ? med - sorted[l] : Infinity;
    const dr = r < n ? sorted[r] - med : Infinity;
    prev = cur;
    if (dl <= dr) {
      cur = dl;
      l--;
    } else {
      cur = dr;
      r++;
    }
  }
  return n % 2 === 1 ? cur : 0.5 * (prev + cur);
}

/**
 * Quantile q ∈ [0, 1] of the first n entries of a sorted buffer by linear interpolation
 * between order statistics (position q·(n−1), the "type 7" rule). NaN when n = 0.
 * Example: quantileOfSorted([1, 2, 3, 4], 4, 0.5) = 2.5.
 */
export function quantileOfSorted(sorted: ArrayLike<number>, n: number, q: number): number {
  if (n <= 0) return NaN;
  const pos = Math.min(Math.max(q, 0), 1) * (n - 1);
  const lo = Math.floor(pos);
  const hi = Math.min(lo + 1, n - 1);
  return sorted[lo] + (pos - lo) * (sorted[hi] - sorted[lo]);
}

/** Finite values of an array, sorted ascending, as a new Float64Array. */
export function sortedFinite(values: ArrayLike<number | null | undefined>): Float64Array {
  let n = 0;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (typeof v === 'number' && Number.isFinite(v)) n++;
  }
  const out = new Float64Array(n);
  let j = 0;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (typeof v === 'number' && Number.isFinite(v)) out[j++] = v;
  }
  out.sort();
  return out;
}

/** Median of the finite values; NaN when there are none. Example: median([3, 1, NaN, 2]) = 2. */
export function median(values: ArrayLike<number | null | undefined>): number {
  const s = sortedFinite(values);
  return medianOfSorted(s, s.length);
}

/**
 * Median absolute deviation from the median of the finite values (unscaled; multiply by
 * MAD_TO_SIGMA for a σ estimate). Example: mad([1, 2, 3, 4, 100]) = 1.
 */
export function mad(values: ArrayLike<number | null | undefined>): number {
  const s = sortedFinite(values);
  const m = medianOfSorted(s, s.length);
  for (let i = 0; i < s.length; i++) s[i] = Math.abs(s[i] - m);
  s.sort();
  return medianOfSorted(s, s.length);
}

/** Quantile q of the finite values (type 7); NaN when there are none. */
export function quantile(values: ArrayLike<number | null | undefined>, q: number): number {
  const s = sortedFinite(values);
  return quantileOfSorted(s, s.length, q);
}

/** Standard normal cumulative distribution Φ(z) (Abramowitz & Stegun 7.1.26 via erf, |error| < 1.5e-7). */
export function normalCdf(z: number): number {
  const x = Math.abs(z) / Math.SQRT2;
  const t = 1 / (1 + 0.3275911 * x);
  const y = 1 - ((((1.061405429 * t - 1.453152027) * t + 1.421413741) * t - 0.284496736) * t + 0.254829592) * t * Math.exp(-x * x);
  return z >= 0 ? 0.5 * (1 + y) : 0.5 * (1 - y);
}

/** ln Γ(x) for x > 0 (Lanczos approximation, g = 7, n = 9). */
export function logGamma(x: number): number {
  const g = 7;
  const c = [
    0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059,
    12.507343278686905, -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
  ];
  if (x < 0.5) return Math.log(Math.PI / Math.sin(Math.PI * x)) - logGamma(1 - x);
  const xx = x - 1;
  let a = c[0];
  const t = xx + g + 0.5;
  for (let i = 1; i < g + 2; i++) a += c[i] / (xx + i);
  return 0.5 * Math.log(2 * Math.PI) + (xx + 0.5) * Math.log(t) - t + Math.log(a);
}

/** Continued fraction for the regularised incomplete beta function (modified Lentz). */
function betaContinuedFraction(a: number, b: number, x: number): number {
  const tiny = 1e-300;
  let c = 1;
  let d = 1 - ((a + b) * x) / (a + 1);
  if (Math.abs(d) < tiny) d = tiny;
  d = 1 / d;
  let h = d;
  for (let m = 1; m <= 300; m++) {
    const m2 = 2 * m;
    let aa = (m * (b - m) * x) / ((a + m2 - 1) * (a + m2));
    d = 1 + aa * d;
    if (Math.abs(d) < tiny) d = tiny;
    c = 1 + aa / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    h *= d * c;
    aa = (-(a + m) * (a + b + m) * x) / ((a + m2) * (a + m2 + 1));
    d = 1 + aa * d;
    if (Math.abs(d) < tiny) d = tiny;
    c = 1 + aa / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    const del = d * c;
    h *= del;
    if (Math.abs(del - 1) < 1e-15) break;
  }
  return h;
}

/** Regularised incomplete beta I_x(a, b). */
export function regularisedBeta(x: number, a: number, b: number): number {
  if (x <= 0) return 0;
  if (x >= 1) return 1;
  const lnFront = logGamma(a + b) - logGamma(a) - logGamma(b) + a * Math.log(x) + b * Math.log(1 - x);
  if (x < (a + 1) / (a + b + 2)) return (Math.exp(lnFront) * betaContinuedFraction(a, b, x)) / a;
  return 1 - (Math.exp(lnFront) * betaContinuedFraction(b, a, 1 - x)) / b;
}

/** Student t cumulative distribution with df degrees of freedom. */
export function studentTCdf(t: number, df: number): number {
  const x = df / (df + t * t);
  const tail = 0.5 * regularisedBeta(x, df / 2, 0.5);
  return t >= 0 ? 1 - tail : tail;
}

/**
 * Student t quantile: the t with P(T ≤ t) = p for df degrees of freedom (bisection on the CDF).
 * Example: studentTQuantile(0.975, 10) ≈ 2.228.
 */
export function studentTQuantile(p: number, df: number): number {
  if (!(p > 0 && p < 1) || !(df > 0)) return NaN;
  let lo = -1e3;
  let hi = 1e3;
  for (let i = 0; i < 200; i++) {
    const mid = 0.5 * (lo + hi);
    if (studentTCdf(mid, df) < p) lo = mid;
    else hi = mid;
    if (hi - lo < 1e-12) break;
  }
  return 0.5 * (lo + hi);
}
