/**
 * The worst chamber of a ring and how likely it is to be the one: from the chambers' residuals
 * against the unit's own normal (ring.ts baselineResiduals: faulty probes left out, the common
 * mode removed) and their ring-to-ring scatter, the probability that each chamber is the one
 * departing most from its normal. A healthy ring, whose chambers all sit within their scatter,
 * names none with a high likelihood; a chamber with a finding is the one named. No verdict
 * (null, with the reason) off steady load or without a baseline. Pure; allocation-free on the
 * per-ring path apart from the verdict object.
 */
import { errorFunction } from 'simple-statistics';
import { baselineMedianScaleInto, type UnitBaseline } from './baseline.ts';

/** The verdict of one ring. Chambers numbered from 1. */
export interface WorstChamberVerdict {
  chamber: number | null;
  /** Probability that `chamber` is the one departing most from its normal, 0–1. */
  likelihood: number | null;
  /** The next most likely chamber, and its probability. */
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
  /** Why no chamber is named (null when one is). */
  reason: string | null;
}

/** Why a ring names no worst chamber: the words the API says beside a null verdict. */
export const NO_WORST_CHAMBER = {
  noRing: 'no ring analysed yet',
  notAtLoad: 'the unit is not at steady load: the chambers are judged on steady rings at load',
  noBaseline: 'no baseline at this load yet: the chambers are judged against the unit\'s own normal',
  noMap: 'too few thermocouples with a residual to map the chambers',
} as const;

/** Floor on a chamber's scatter, °C: a bin whose chamber never moved still has reading noise. */
const MIN_SCATTER_DEG_C = 0.05;
/** Integration steps of the probability integral. */
const STEPS = 160;

const SQRT1_2 = Math.SQRT1_2;
const INV_SQRT_2PI = 1 / Math.sqrt(2 * Math.PI);

/**
 * P(chamber k departs most from its normal), for every chamber, into `out`: each chamber's true
 * departure is taken as normal about its residual rₖ with its scatter sₖ, and
 * Pₖ = ∫₀^∞ f_|Tₖ|(x) · Πⱼ≠ₖ P(|Tⱼ| < x) dx, where |T| is the folded normal:
 * P(|T| < x) = ½·(erf((x − r)/(s√2)) + erf((x + r)/(s√2))), f_|T|(x) = (φ((x − r)/s) + φ((x + r)/s))/s.
 * Chambers with a non-finite residual get 0 and take no part. Midpoint rule over
 * [0, maxₖ(|rₖ| + 8sₖ)] in STEPS steps; the result is normalised to sum to 1. Returns the
 * number of chambers that took part. Example: residuals [−20, 0, 0] with scatter 1 → P ≈ [1, 0, 0];
 * [0.1, −0.1, 0] with scatter 1 → about a third each.
 */
export function worstChamberProbabilities(residualDegC: ArrayLike<number>, scatterDegC: ArrayLike<number>, n: number, out: Float64Array, cdf: Float64Array): number {
  let count = 0;
  let top = 0;
  for (let k = 0; k < n; k++) {
    out[k] = 0;
    const r = residualDegC[k];
    if (!Number.isFinite(r)) continue;
    count++;
    const s = scatterOf(scatterDegC[k]);
    const reach = Math.abs(r) + 8 * s;
    if (reach > top) top = reach;
  }
  if (count === 0) return 0;
  if (count === 1) {
    for (let k = 0; k < n; k++) if (Number.isFinite(residualDegC[k])) out[k] = 1;
    return 1;
  }
  const h = top / STEPS;
  for (let step = 0; step < STEPS; step++) {
    const x = (step + 0.5) * h;
    // P(|Tⱼ| < x) of every chamber, and their product.
    let product = 1;
    let zeros = 0;
    for (let j = 0; j < n; j++) {
      const r = residualDegC[j];
      if (!Number.isFinite(r)) continue;
      const s = scatterOf(scatterDegC[j]);
      const c = 0.5 * (errorFunction(((x - r) / s) * SQRT1_2) + errorFunction(((x + r) / s) * SQRT1_2));
      cdf[j] = c;
      if (c > 0) product *= c;
      else zeros++;
    }
    if (zeros > 1) continue;
    for (let k = 0; k < n; k++) {
      const r = residualDegC[k];
      if (!Number.isFinite(r)) continue;
      const ck = cdf[k];
      // Πⱼ≠ₖ: the product without k's own factor (or, with one zero factor, only for k = that one).
      const others = zeros === 1 ? (ck > 0 ? 0 : product) : product / ck;
      if (others === 0) continue;
      const s = scatterOf(scatterDegC[k]);
      const a = (x - r) / s;
      const b = (x + r) / s;
      out[k] += ((Math.exp(-0.5 * a * a) + Math.exp(-0.5 * b * b)) * INV_SQRT_2PI * others * h) / s;
    }
  }
  let sum = 0;
  for (let k = 0; k < n; k++) sum += out[k];
  if (sum > 0) for (let k = 0; k < n; k++) out[k] /= sum;
  return count;
}

function scatterOf(s: number): number {
  return Number.isFinite(s) && s > MIN_SCATTER_DEG_C ? s : MIN_SCATTER_DEG_C;
}

/** A chamber finding of the ring (numbered from 1), its grade's rank and its residual's size. */
export interface ChamberFindingRef {
  chamber: number;
  gradeRank: number;
  magnitudeDegC: number;
}

/**
 * The verdict from the chambers' residuals and scatter (null arrays: no map), given whether the
 * ring is at steady load and has a baseline, and the ring's chamber findings. The chamber named
 * is the most severe finding's (then the largest residual's) when there is one, else the most
 * probable; the runner-up is the most probable of the others. `probs` and `cdf` are working
 * arrays of at least n values.
 */
export function worstChamberVerdict(
  input: { atLoad: boolean; hasBaseline: boolean; residualDegC: ArrayLike<number> | null; scatterDegC: ArrayLike<number> | null; n: number; findings?: readonly ChamberFindingRef[] },
  probs: Float64Array,
  cdf: Float64Array,
): WorstChamberVerdict {
  const none = (reason: string): WorstChamberVerdict => ({ chamber: null, likelihood: null, runnerUpChamber: null, runnerUpLikelihood: null, reason });
  if (!input.atLoad) return none(NO_WORST_CHAMBER.notAtLoad);
  if (!input.hasBaseline) return none(NO_WORST_CHAMBER.noBaseline);
  if (!input.residualDegC || !input.scatterDegC) return none(NO_WORST_CHAMBER.noMap);
  const n = input.n;
  if (worstChamberProbabilities(input.residualDegC, input.scatterDegC, n, probs, cdf) === 0) return none(NO_WORST_CHAMBER.noMap);
  let named = -1;
  let best: ChamberFindingRef | null = null;
  for (const f of input.findings ?? []) {
    if (f.chamber < 1 || f.chamber > n) continue;
    if (!best || f.gradeRank > best.gradeRank || (f.gradeRank === best.gradeRank && f.magnitudeDegC > best.magnitudeDegC)) best = f;
  }
  if (best) named = best.chamber - 1;
  else for (let k = 0; k < n; k++) if (named < 0 || probs[k] > probs[named]) named = k;
  let second = -1;
  for (let k = 0; k < n; k++) if (k !== named && Number.isFinite(input.residualDegC[k]) && (second < 0 || probs[k] > probs[second])) second = k;
  const round = (p: number) => Math.round(p * 1e4) / 1e4;
  return {
    chamber: named + 1,
    likelihood: round(probs[named]),
    runnerUpChamber: second >= 0 ? second + 1 : null,
    runnerUpLikelihood: second >= 0 ? round(probs[second]) : null,
    reason: null,
  };
}

const SCALE = { median: NaN, scale: NaN };

/**
 * Each chamber's scatter about its true departure at this load, °C, into `out`: its ring-to-ring
 * scatter in the baseline's load bin (1.4826·MAD of its estimate in the reference window) and
 * the uncertainty of its mapped residual (ring.ts baselineResiduals, from how well the map fits
 * the departures), added in quadrature as independent errors; NaN where the baseline has no
 * fitted bin. Returns how many chambers have one.
 */
export function chamberScatterInto(baseline: UnitBaseline, loadFraction: number, n: number, uncertaintyDegC: ArrayLike<number> | null, out: Float64Array): number {
  let count = 0;
  for (let k = 0; k < n; k++) {
    const b = baseline.chambers[k];
    if (b && baselineMedianScaleInto(b, loadFraction, SCALE)) {
      const u = uncertaintyDegC ? uncertaintyDegC[k] : 0;
      out[k] = Number.isFinite(u) ? Math.hypot(SCALE.scale, u) : SCALE.scale;
      count++;
    } else out[k] = NaN;
  }
  return count;
}

/**
 * Why a stored analysis names no worst chamber, from what it kept: null when it names one.
 * `analysis` null: no ring analysed yet.
 */
export function noWorstChamberReason(analysis: { worstChamber: number | null; steady: boolean; baselineVersion: number | null; chamberResidual?: ArrayLike<number | null> | null } | null): string | null {
  if (!analysis) return NO_WORST_CHAMBER.noRing;
  if (analysis.worstChamber !== null) return null;
  if (!analysis.steady) return NO_WORST_CHAMBER.notAtLoad;
  if (analysis.baselineVersion === null) return NO_WORST_CHAMBER.noBaseline;
  const r = analysis.chamberResidual;
  let mapped = false;
  if (r) for (let k = 0; k < r.length; k++) if (typeof r[k] === 'number' && Number.isFinite(r[k])) mapped = true;
  return mapped ? NO_WORST_CHAMBER.noBaseline : NO_WORST_CHAMBER.noMap;
}
