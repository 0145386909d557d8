/**
 * The chamber map: a circular plume kernel, the forward model (chamber deviations → ring
 * readings) and the inverse (ring deviations → chamber estimates by regularised least
 * squares), the runner-up chamber with its likelihood. Pure functions; the solver matrices
 * are built here and cached by the ring analysis context (ring.ts).
 */
import { chamberAnglesDeg, chamberPitchDeg, signedArcDeg, thermocoupleAnglesDeg } from './geometry.ts';
import { solveInPlace } from './linalg.ts';
import { swirlDeg } from './swirl.ts';
import type { PlumeKernel, UnitConfig } from './types.ts';

const DEG = Math.PI / 180;

/** Shape and width of one chamber's plume on the ring. */
export interface KernelSpec {
  shape: PlumeKernel;
  /** Width σ of the plume, degrees (the von Mises concentration is κ = 1/σ² in radians). */
  widthDeg: number;
}

/**
 * Peak-normalised plume kernel w(Δ) at angular distance Δ (degrees) from the plume centre.
 * von Mises: exp(κ·(cos Δ − 1)), κ = 1/σ²; wrapped Gaussian: Σⱼ exp(−(Δ + 360j)² / 2σ²), j = −2…2.
 * Example: von Mises, σ = 18°: w(0) = 1, w(20°) ≈ 0.54.
 */
export function plumeKernel(deltaDeg: number, spec: KernelSpec): number {
  const s = spec.widthDeg;
  if (spec.shape === 'von-mises') {
    const kappa = 1 / (s * DEG * (s * DEG));
    return Math.exp(kappa * (Math.cos(deltaDeg * DEG) - 1));
  }
  const d = signedArcDeg(0, deltaDeg);
  let sum = 0;
  for (let j = -2; j <= 2; j++) {
    const x = d + 360 * j;
    sum += Math.exp((-x * x) / (2 * s * s));
  }
  return sum;
}

/** Plume width in degrees as a fraction of the chamber pitch: σ = fraction · 360/N. */
export function plumeWidthDeg(config: Pick<UnitConfig, 'chambers'>, widthFractionOfPitch: number): number {
  return widthFractionOfPitch * chamberPitchDeg(config);
}

/**
 * Forward model: ring readings for given chamber deviations at load L,
 * x(θᵢ) = baseDegC + Σₖ aₖ·w(θᵢ − φₖ − s·ψ(L)). Index 0 = thermocouple 1 / chamber 1.
 */
export function ringFromChambers(
  config: Pick<UnitConfig, 'thermocouples' | 'chambers' | 'swirl'>,
  chamberDeviationDegC: ArrayLike<number>,
  loadFraction: number,
  baseDegC: number,
  kernel: KernelSpec,
): Float64Array {
  const tc = thermocoupleAnglesDeg(config);
  const ch = chamberAnglesDeg(config);
  const shift = config.swirl.sense * swirlDeg(config.swirl.curve, loadFraction);
  const out = new Float64Array(tc.length);
  for (let i = 0; i < tc.length; i++) {
    let v = baseDegC;
    for (let k = 0; k < ch.length; k++) v += chamberDeviationDegC[k] * plumeKernel(tc[i] - ch[k] - shift, kernel);
    out[i] = v;
  }
  return out;
}

/**
 * A prepared inverse for one (load bin, validity mask): the linear operator G that maps the
 * centred valid readings y to x = [c, a₁…a_N], the solution of
 *   min Σᵢ valid (yᵢ − c − Σₖ aₖ·Wᵢₖ)² + λ·Σₖ aₖ²   subject to Σₖ aₖ = 0,
 * where Wᵢₖ = w(θᵢ − φₖ − s·ψ). Chamber deviations aₖ are relative to the average chamber;
 * c is the ring level. Invalid thermocouples have zero rows in the design and zero columns in G.
 */
export interface ChamberSolver {
  /** Thermocouples M and chambers N. */
  m: number;
  n: number;
  /** Design matrix, M × (N+1) row-major: [1, W_i1 … W_iN]; zero rows for invalid thermocouples. */
  design: Float64Array;
  /** Solution operator, (N+1) × M row-major. */
  operator: Float64Array;
  /** ‖row k of G‖₂: the standard error of xₖ per unit residual σ (the estimator's spread alone). */
  rowNorm: Float64Array;
  /**
   * √ of the diagonal of the constrained normal equations' inverse, [(DᵀD + Λ | C)⁻¹]ₖₖ: the
   * one-σ uncertainty of xₖ per unit residual σ as the fit's own conditioning gives it (the
   * ridge read as a prior, so a chamber the probes hardly see gets about σ/√λ, not a small
   * number from being shrunk to 0).
   */
  posteriorSd: Float64Array;
  /**
   * Per chamber (index 0 = chamber 1), 1 when its plume covers a usable thermocouple (the
   * kernel's response there at least the solver's coverResponse), else 0: not observable.
   */
  observable: Uint8Array;
  /** Residual degrees of freedom: valid count − trace of the hat matrix. */
  residualDof: number;
  validCount: number;
  /** Indices of the valid thermocouples, and G and the design restricted to them (p × nv, nv × p). */
  validIndex: Int32Array;
  operatorCompact: Float64Array;
  designCompact: Float64Array;
  /** Validity mask the solver was built for, thermocouples 0–31 and 32–63. */
  maskLo: number;
  maskHi: number;
  /** Load bin index and the swirl shift s·ψ used, degrees. */
  bin: number;
  shiftDeg: number;
}

/**
 * Builds the chamber solver for thermocouple angles, chamber angles, a plume shift s·ψ(L) and
 * a validity flag per thermocouple (true = use). Ridge λ = ridgeFraction · mean diagonal of WᵀW.
 */
export function buildChamberSolver(
  tcAnglesDeg: ArrayLike<number>,
  chamberAnglesDegArr: ArrayLike<number>,
  shiftDeg: number,
  usable: ArrayLike<boolean | number>,
  kernel: KernelSpec,
  ridgeFraction: number,
  coverResponse = 0,
): ChamberSolver {
  const m = tcAnglesDeg.length;
  const n = chamberAnglesDegArr.length;
  const p = n + 1;
  const design = new Float64Array(m * p);
  let validCount = 0;
  let maskLo = 0;
  let maskHi = 0;
  for (let i = 0; i < m; i++) {
    if (!usable[i]) continue;
    validCount++;
    if (i < 32) maskLo = (maskLo | (1 << i)) >>> 0;
    else maskHi = (maskHi | (1 << (i - 32))) >>> 0;
    design[i * p] = 1;
    for (let k = 0; k < n; k++) design[i * p + 1 + k] = plumeKernel(tcAnglesDeg[i] - chamberAnglesDegArr[k] - shiftDeg, kernel);
  }
  // KKT system of size p+1: [[DᵀD + Λ, Cᵀ], [C, 0]] · Z = [Dᵀ; 0], C = [0, 1, …, 1].
  const q = p + 1;
  const kkt = new Float64Array(q * q);
  for (let r = 0; r < p; r++) {
    for (let c = 0; c < p; c++) {
      let s = 0;
      for (let i = 0; i < m; i++) s += design[i * p + r] * design[i * p + c];
      kkt[r * q + c] = s;
    }
  }
  let diagMean = 0;
  for (let k = 1; k < p; k++) diagMean += kkt[k * q + k];
  diagMean /= n;
  const lambda = ridgeFraction * (diagMean > 0 ? diagMean : 1);
  for (let k = 1; k < p; k++) {
    kkt[k * q + k] += lambda;
    kkt[k * q + p] = 1;
    kkt[p * q + k] = 1;
  }
  if (validCount === 0) kkt[0] = 1; // no data: the ring level is undetermined, keep the system regular
  // The inverse of the system (its diagonal is the fit's conditioning), before the solve destroys it.
  const inv = new Float64Array(q * q);
  for (let r = 0; r < q; r++) inv[r * q + r] = 1;
  const invOk = solveInPlace(kkt.slice(), inv, q, q);
  const rhs = new Float64Array(q * m);
  for (let r = 0; r < p; r++) for (let i = 0; i < m; i++) rhs[r * m + i] = design[i * p + r];
  const ok = solveInPlace(kkt, rhs, q, m);
  const operator = new Float64Array(p * m);
  if (ok) operator.set(rhs.subarray(0, p * m));
  else operator.fill(NaN);
  const rowNorm = new Float64Array(p);
  for (let r = 0; r < p; r++) {
    let s = 0;
    for (let i = 0; i < m; i++) s += operator[r * m + i] * operator[r * m + i];
    rowNorm[r] = Math.sqrt(s);
  }
  const posteriorSd = new Float64Array(p);
  for (let r = 0; r < p; r++) posteriorSd[r] = invOk ? Math.sqrt(Math.max(inv[r * q + r], 0)) : NaN;
  const observable = new Uint8Array(n);
  for (let k = 0; k < n; k++) {
    let best = 0;
    for (let i = 0; i < m; i++) if (usable[i] && design[i * p + 1 + k] > best) best = design[i * p + 1 + k];
    observable[k] = validCount > 0 && best >= coverResponse ? 1 : 0;
  }
  let trace = 0;
  for (let i = 0; i < m; i++) for (let r = 0; r < p; r++) trace += design[i * p + r] * operator[r * m + i];
  const validIndex = new Int32Array(validCount);
  for (let i = 0, j = 0; i < m; i++) if (usable[i]) validIndex[j++] = i;
  const operatorCompact = new Float64Array(p * validCount);
  const designCompact = new Float64Array(validCount * p);
  for (let j = 0; j < validCount; j++) {
    const i = validIndex[j];
    for (let r = 0; r < p; r++) {
      operatorCompact[r * validCount + j] = operator[r * m + i];
      designCompact[j * p + r] = design[i * p + r];
    }
  }
  return {
    m, n, design, operator, rowNorm, posteriorSd, observable, residualDof: validCount - trace, validCount,
    validIndex, operatorCompact, designCompact, maskLo, maskHi, bin: -1, shiftDeg,
  };
}

/** Result slots written by `estimateChambers`; reused by the ring hot path. */
export interface ChamberEstimateOut {
  chamberDeviationDegC: Float64Array;
  chamberUncertaintyDegC: Float64Array;
  ringLevelDegC: number;
  fitResidualSdDegC: number;
}

/**
 * Chamber estimates from valid readings: x = G·(reading − centre); residual σ from
 * RSS / residual dof (floored at residualFloorDegC, and that floor, a probe's noise, when the
 * fit has no spare degrees of freedom); uncertainty of aₖ = σ·√[(DᵀD + Λ | C)⁻¹]ₖₖ, the fit's
 * own conditioning (solver.posteriorSd), so a chamber the probes barely see is uncertain
 * however few degrees of freedom are left. A chamber the solver finds not observable gets NaN
 * for both. values holds the readings; only the solver's valid thermocouples are read.
 * scratchY needs room for M values, scratchFit for N+1.
 */
export function estimateChambers(
  solver: ChamberSolver,
  values: Float64Array,
  centreDegC: number,
  residualFloorDegC: number,
  scratchY: Float64Array,
  scratchFit: Float64Array,
  out: ChamberEstimateOut,
): void {
  const { n, validCount: nv, validIndex, operatorCompact: g, designCompact: d, posteriorSd, observable } = solver;
  const p = n + 1;
  for (let j = 0; j < nv; j++) scratchY[j] = values[validIndex[j]] - centreDegC;
  for (let r = 0; r < p; r++) {
    let s = 0;
    const base = r * nv;
    for (let j = 0; j < nv; j++) s += g[base + j] * scratchY[j];
    scratchFit[r] = s;
  }
  let rss = 0;
  for (let j = 0; j < nv; j++) {
    let f = 0;
    const base = j * p;
    for (let r = 0; r < p; r++) f += d[base + r] * scratchFit[r];
    const e = scratchY[j] - f;
    rss += e * e;
  }
  const dof = solver.residualDof;
  const sd = dof > 0.5 ? Math.sqrt(rss / dof) : NaN;
  const sigma = sd > residualFloorDegC ? sd : residualFloorDegC;
  out.ringLevelDegC = centreDegC + scratchFit[0];
  out.fitResidualSdDegC = sd;
  for (let k = 0; k < n; k++) {
    const seen = observable[k] === 1;
    out.chamberDeviationDegC[k] = seen ? scratchFit[k + 1] : NaN;
    out.chamberUncertaintyDegC[k] = seen ? sigma * posteriorSd[k + 1] : NaN;
  }
}

/** Which chamber a plume belongs to, and the next most likely one. Chambers numbered from 1. */
export interface ChamberAttribution {
  chamber: number;
  likelihood: number;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number;
}

/**
 * Attributes the plume around chamber index j (from 0) between j and its neighbours: the
 * same-sign deviation mass of j−1, j, j+1 gives the plume centre δ (in pitches, centroid);
 * each candidate k gets likelihood ∝ exp(−½·((δ − dₖ)·pitch / σ)²), dₖ ∈ {−1, 0, +1}, where σ is
 * the swirl uncertainty in degrees. Returns the runner-up (the neighbour on δ's side) and both
 * likelihoods (normalised over the three candidates). Writes into out and returns it.
 */
export function attributeChamber(
  deviationDegC: ArrayLike<number>,
  j: number,
  pitchDeg: number,
  swirlUncertaintyDeg: number,
  out: ChamberAttribution,
): ChamberAttribution {
  const n = deviationDegC.length;
  out.chamber = j + 1;
  if (n < 2 || !Number.isFinite(deviationDegC[j])) {
    out.likelihood = n < 2 ? 1 : NaN;
    out.runnerUpChamber = null;
    out.runnerUpLikelihood = 0;
    return out;
  }
  const sign = deviationDegC[j] < 0 ? -1 : 1;
  const l = (j - 1 + n) % n;
  const r = (j + 1) % n;
  const vl = sign * deviationDegC[l];
  const vr = sign * deviationDegC[r];
  const wl = vl > 0 ? vl : 0;
  const wr = vr > 0 ? vr : 0;
  const wj = sign * deviationDegC[j];
  const total = wl + wj + wr;
  const delta = total > 0 ? (wr - wl) / total : 0;
  const sigma = swirlUncertaintyDeg > 0 ? swirlUncertaintyDeg : 1e-9;
  const x = delta * pitchDeg;
  const pj = Math.exp(-0.5 * (x / sigma) ** 2);
  const pl = l === r ? 0 : Math.exp(-0.5 * ((x + pitchDeg) / sigma) ** 2);
  const pr = Math.exp(-0.5 * ((x - pitchDeg) / sigma) ** 2);
  const norm = pj + pl + pr;
  const useRight = delta > 0 || (delta === 0 && wr >= wl);
  out.likelihood = norm > 0 ? pj / norm : 1;
  out.runnerUpChamber = (useRight ? r : l) + 1;
  out.runnerUpLikelihood = norm > 0 ? (useRight ? pr : pl) / norm : 0;
  return out;
}
