/**
 * Swirl calibration from data: in a window where one chamber is known to be cold,
 * locate its plume on the ring at each load by circular cross-correlation of the deviation
 * profile with the single-plume kernel, refine to sub-thermocouple resolution, and fit ψ(L)
 * (piecewise linear or a low-order polynomial). Returns the curve with its residuals. Pure.
 */
import { plumeKernel, type KernelSpec } from './chambers.ts';
import { chamberAnglesDeg, chamberPitchDeg, signedArcDeg, thermocoupleAnglesDeg, wrapDeg } from './geometry.ts';
import { solveInPlace } from './linalg.ts';
import { MAD_TO_SIGMA } from './stats.ts';
import type { PlumeKernel, Reading, SwirlPoint, UnitConfig } from './types.ts';
import { classifyMissingAndRange, defaultValidityOptions, robustCentreInto } from './validity.ts';
import { VALIDITY } from './types.ts';

/** One calibration ring: corrected load and the readings (°C, index 0 = thermocouple 1). */
export interface CalibrationSample {
  loadFraction: number;
  readingsDegC: ArrayLike<Reading>;
}

export interface SwirlCalibrationOptions {
  method: 'piecewise-linear' | 'polynomial';
  /** Polynomial degree (0–3) when method = polynomial. */
  degree: number;
  /** Knots (load fractions) when piecewise linear; default: up to 4 evenly over the data's range. */
  knots?: number[];
  kernel: PlumeKernel;
  /** Plume width as a fraction of chamber pitch. */
  plumeWidthFraction: number;
  /** Correlation grid step as a fraction of the thermocouple pitch (then parabolic refinement). */
  gridFractionOfTcPitch: number;
  /** Readings outside this range are ignored, °C. */
  floorDegC: number;
  ceilingDegC: number;
}

export const defaultSwirlCalibrationOptions: SwirlCalibrationOptions = {
  method: 'piecewise-linear',
  degree: 2,
  kernel: 'von-mises',
  plumeWidthFraction: 0.5,
  gridFractionOfTcPitch: 0.25,
  floorDegC: defaultValidityOptions.floorDegC,
  ceilingDegC: defaultValidityOptions.ceilingDegC,
};

export interface SwirlCalibrationPoint {
  loadFraction: number;
  /** Plume angle found on the ring, degrees. */
  plumeAngleDeg: number;
  /** Swirl implied by it, s·(plume − φₖ), degrees (unwrapped near the data's circular mean). */
  swirlDeg: number;
  fittedDeg: number;
  residualDeg: number;
}

export interface SwirlCalibration {
  chamber: number;
  method: string;
  curve: SwirlPoint[];
  points: SwirlCalibrationPoint[];
  rmsResidualDeg: number;
  /** Samples with too few valid readings or no cold plume. */
  rejected: number;
}

/**
 * Locates a cold plume on the ring: maximises c(α) = −Σᵢ dᵢ·w(θᵢ − α) over a grid of α (step a
 * fraction of the thermocouple pitch), then refines with a parabola through the best grid point
 * and its two neighbours. dᵢ are deviations from the ring median of valid readings. Returns NaN
 * when fewer than 3 readings are valid or nothing is colder than the centre.
 */
export function locateColdPlumeDeg(tcAnglesDeg: ArrayLike<number>, deviationsDegC: ArrayLike<number>, kernel: KernelSpec, gridStepDeg: number): number {
  const steps = Math.max(8, Math.ceil(360 / gridStepDeg));
  const step = 360 / steps;
  const corr = new Float64Array(steps);
  let best = -1;
  let bestV = -Infinity;
  let valid = 0;
  for (let i = 0; i < tcAnglesDeg.length; i++) if (Number.isFinite(deviationsDegC[i])) valid++;
  if (valid < 3) return NaN;
  for (let g = 0; g < steps; g++) {
    const a = g * step;
    let c = 0;
    for (let i = 0; i < tcAnglesDeg.length; i++) {
      const d = deviationsDegC[i];
      if (Number.isFinite(d)) c -= d * plumeKernel(tcAnglesDeg[i] - a, kernel);
    }
    corr[g] = c;
    if (c > bestV) {
      bestV = c;
      best = g;
    }
  }
  if (!(bestV > 0)) return NaN;
  const y0 = corr[(best - 1 + steps) % steps];
  const y1 = corr[best];
  const y2 = corr[(best + 1) % steps];
  const den = y0 - 2 * y1 + y2;
  const off = den < 0 ? (0.5 * (y0 - y2)) / den : 0;
  return wrapDeg((best + Math.max(-0.5, Math.min(0.5, off))) * step);
}

/**
 * Calibrates ψ(L) from rings in which chamber `chamber` (numbered from 1) is known to be cold.
 * Each ring gives a point (L, s·(plume − φₖ)); swirl values are unwrapped around their circular
 * mean so a curve crossing 0°/360° stays continuous; then the curve is fitted by least squares.
 * The curve's angles are within −360°…360°, ready for a unit's swirl.curve.
 */
export function calibrateSwirl(
  config: Pick<UnitConfig, 'thermocouples' | 'chambers' | 'swirl'>,
  chamber: number,
  samples: readonly CalibrationSample[],
  options: Partial<SwirlCalibrationOptions> = {},
): SwirlCalibration {
  const o = { ...defaultSwirlCalibrationOptions, ...options };
  const n = config.chambers.count;
  if (!Number.isInteger(chamber) || chamber < 1 || chamber > n) throw new Error(`chamber must be from 1 to ${n}; got ${chamber}`);
  const tc = thermocoupleAnglesDeg(config);
  const m = tc.length;
  const phi = chamberAnglesDeg(config)[chamber - 1];
  const kernel: KernelSpec = { shape: o.kernel, widthDeg: o.plumeWidthFraction * chamberPitchDeg(config) };
  const gridStep = (o.gridFractionOfTcPitch * 360) / m;
  const codes = new Uint8Array(m);
  const vals = new Float64Array(m);
  const scratch = new Float64Array(2 * m);
  const cm = new Float64Array(2);
  const dev = new Float64Array(m);
  const raw: { loadFraction: number; plumeAngleDeg: number; swirlDeg: number }[] = [];
  let rejected = 0;
  for (const s of samples) {
    classifyMissingAndRange(s.readingsDegC, m, o.floorDegC, o.ceilingDegC, codes, vals);
    robustCentreInto(vals, codes, m, scratch, cm);
    for (let i = 0; i < m; i++) dev[i] = codes[i] === VALIDITY.valid ? vals[i] - cm[0] : NaN;
    const a = locateColdPlumeDeg(tc, dev, kernel, gridStep);
    if (!Number.isFinite(a) || !Number.isFinite(s.loadFraction)) {
      rejected++;
      continue;
    }
    raw.push({ loadFraction: s.loadFraction, plumeAngleDeg: a, swirlDeg: wrapDeg(config.swirl.sense * (a - phi)) });
  }
  if (raw.length === 0) return { chamber, method: o.method, curve: [], points: [], rmsResidualDeg: NaN, rejected };
  // Unwrap around the circular mean of the swirl estimates.
  let sx = 0;
  let sy = 0;
  for (const p of raw) {
    sx += Math.cos((p.swirlDeg * Math.PI) / 180);
    sy += Math.sin((p.swirlDeg * Math.PI) / 180);
  }
  // The mean is taken in (−180°, 180°], so every point lies within 360° of 0°, as a unit's
  // configuration requires (swirl.curve angles from −360° to 360°).
  const meanDeg = signedArcDeg(0, (Math.atan2(sy, sx) * 180) / Math.PI);
  for (const p of raw) p.swirlDeg = meanDeg + signedArcDeg(meanDeg, p.swirlDeg);
  const loads = raw.map((p) => p.loadFraction);
  const swirl = raw.map((p) => p.swirlDeg);
  const model = o.method === 'polynomial' ? fitPolynomial(loads, swirl, Math.max(0, Math.min(3, Math.floor(o.degree)))) : fitPiecewiseLinear(loads, swirl, o.knots);
  let ss = 0;
  const points = raw.map((p) => {
    const f = model.evaluate(p.loadFraction);
    const r = p.swirlDeg - f;
    ss += r * r;
    return { ...p, fittedDeg: f, residualDeg: r };
  });
  return { chamber, method: o.method, curve: model.curve.map(([l, d]) => [l, withinConfigRange(d)] as SwirlPoint), points, rmsResidualDeg: Math.sqrt(ss / points.length), rejected };
}

/**
 * A fitted swirl angle as a unit's configuration accepts it (−360° to 360°): as it is when it
 * fits, else the same direction in (−180°, 180°] (swirlDeg interpolates the shorter way round,
 * so the curve means the same).
 */
function withinConfigRange(deg: number): number {
  return deg >= -360 && deg <= 360 ? deg : signedArcDeg(0, deg);
}

interface FittedCurve {
  evaluate(loadFraction: number): number;
  curve: SwirlPoint[];
}

/** v ↦ Σ coefⱼ·basisⱼ(v): the fitted curve of a linear least-squares fit on a basis. */
function basisCombination(basis: (v: number, out: Float64Array) => void, coef: ArrayLike<number>): (v: number) => number {
  const b = new Float64Array(coef.length);
  return (v: number) => {
    basis(v, b);
    let s = 0;
    for (let j = 0; j < coef.length; j++) s += b[j] * coef[j];
    return s;
  };
}

/**
 * Least-squares piecewise-linear fit with hat basis functions at the knots (clamped outside).
 * A tiny penalty on the slope between neighbouring knots, λ·Σⱼ (cⱼ₊₁ − cⱼ)² / (kⱼ₊₁ − kⱼ), keeps
 * knots without nearby data determined: such a knot follows its neighbours (it lies on the line
 * between the nearest supported knots either side, or holds the nearest one's value at an end)
 * instead of falling to 0°; where data are, the penalty is too small to move the fit.
 */
export function fitPiecewiseLinear(x: readonly number[], y: readonly number[], knotsIn?: number[]): FittedCurve {
  const lo = Math.min(...x);
  const hi = Math.max(...x);
  const distinct = new Set(x).size;
  let knots = knotsIn && knotsIn.length > 0 ? [...knotsIn].sort((a, b) => a - b) : [];
  if (knots.length === 0) {
    const k = Math.min(4, distinct);
    knots = k <= 1 || hi === lo ? [lo] : Array.from({ length: k }, (_, i) => lo + ((hi - lo) * i) / (k - 1));
  }
  const p = knots.length;
  const basis = (v: number, out: Float64Array) => {
    out.fill(0);
    if (p === 1 || v <= knots[0]) {
      out[0] = 1;
      return;
    }
    if (v >= knots[p - 1]) {
      out[p - 1] = 1;
      return;
    }
    for (let j = 1; j < p; j++) {
      if (v <= knots[j]) {
        const t = (v - knots[j - 1]) / (knots[j] - knots[j - 1]);
        out[j - 1] = 1 - t;
        out[j] = t;
        return;
      }
    }
  };
  // Slope penalty DᵀWD, W = 1 / knot spacing relative to the mean spacing.
  const penalty = new Float64Array(p * p);
  const meanGap = p > 1 ? (knots[p - 1] - knots[0]) / (p - 1) : 1;
  for (let j = 0; j + 1 < p; j++) {
    const gap = knots[j + 1] - knots[j];
    const w = gap > 0 ? meanGap / gap : 1;
    penalty[j * p + j] += w;
    penalty[(j + 1) * p + j + 1] += w;
    penalty[j * p + j + 1] -= w;
    penalty[(j + 1) * p + j] -= w;
  }
  const coef = leastSquares(x, y, p, basis, 1e-6, penalty);
  const evaluate = basisCombination(basis, coef);
  return { evaluate, curve: knots.map((k, j) => [k, coef[j]] as SwirlPoint) };
}

/** Least-squares polynomial of the given degree in (L − mean L); the curve is sampled at 5 loads. */
export function fitPolynomial(x: readonly number[], y: readonly number[], degree: number): FittedCurve {
  const mean = x.reduce((a, b) => a + b, 0) / x.length;
  const distinct = new Set(x).size;
  const p = Math.min(degree, distinct - 1) + 1;
  const basis = (v: number, out: Float64Array) => {
    let t = 1;
    for (let j = 0; j < p; j++) {
      out[j] = t;
      t *= v - mean;
    }
  };
  const coef = leastSquares(x, y, p, basis, 0);
  const evaluate = basisCombination(basis, coef);
  const lo = Math.min(...x);
  const hi = Math.max(...x);
  const samplesAt = hi === lo ? [lo] : Array.from({ length: 5 }, (_, i) => lo + ((hi - lo) * i) / 4);
  return { evaluate, curve: samplesAt.map((l) => [l, evaluate(l)] as SwirlPoint) };
}

/**
 * Least squares on a basis with a penalty: minimises Σᵢ (yᵢ − Σⱼ cⱼ·bⱼ(xᵢ))² + λ·cᵀPc with
 * λ = weight · (mean diagonal of BᵀB); P is the identity (a ridge towards 0) unless given.
 */
function leastSquares(x: readonly number[], y: readonly number[], p: number, basis: (v: number, out: Float64Array) => void, weight: number, penalty?: Float64Array): Float64Array {
  const a = new Float64Array(p * p);
  const rhs = new Float64Array(p);
  const b = new Float64Array(p);
  for (let i = 0; i < x.length; i++) {
    basis(x[i], b);
    for (let r = 0; r < p; r++) {
      rhs[r] += b[r] * y[i];
      for (let c = 0; c < p; c++) a[r * p + c] += b[r] * b[c];
    }
  }
  let tr = 0;
  for (let r = 0; r < p; r++) tr += a[r * p + r];
  const lambda = weight * (tr / p || 1);
  if (penalty) for (let r = 0; r < p * p; r++) a[r] += lambda * penalty[r];
  else for (let r = 0; r < p; r++) a[r * p + r] += lambda;
  if (!solveInPlace(a, rhs, p, 1)) rhs.fill(NaN);
  return rhs;
}

/** Robust σ of calibration residuals (1.4826 · MAD), degrees. */
export function calibrationResidualSigmaDeg(c: SwirlCalibration): number {
  const r = c.points.map((p) => p.residualDeg).sort((a, b) => a - b);
  if (r.length === 0) return NaN;
  const med = r[r.length >> 1];
  const d = r.map((v) => Math.abs(v - med)).sort((a, b) => a - b);
  return MAD_TO_SIGMA * d[d.length >> 1];
}
