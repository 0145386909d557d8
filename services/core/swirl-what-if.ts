/**
 * Swirl what-if: the chamber map of stored rings redone with another swirl curve, to see
 * whether a call depends on the curve. Each ring's valid thermocouple deviations are solved for
 * the chamber estimates (chambers.ts) with the plume shift s·ψ(L) of a given curve; the window's
 * mean estimate per chamber is set against a normal learnt the same way (the mean estimate per
 * 5 % load band over the baseline's reference window, mapped with the same curve), so the two
 * curves are each judged on their own terms. The sensitivity of an estimate is its central
 * difference for the curve moved by ±1°: how many °C the chamber's estimate moves per degree of
 * swirl error. Pure: stored rings in, numbers out.
 */
import { buildChamberSolver, estimateChambers, plumeWidthDeg, type ChamberSolver, type KernelSpec } from './chambers.ts';
import { chamberAnglesDeg, thermocoupleAnglesDeg } from './geometry.ts';
import { defaultAnalysisOptions } from './ring.ts';
import { swirlDeg } from './swirl.ts';
import type { SwirlPoint, UnitConfig } from './types.ts';

export interface WhatIfRing {
  loadFraction: number;
  /** Reading − ring centre per thermocouple, °C; null or NaN where the reading was not used. */
  deviationC: ArrayLike<number | null>;
  /** Validity code per thermocouple; 0 = valid. */
  validity: ArrayLike<number>;
}

export interface WhatIfChamber {
  chamber: number;
  /** Mean chamber estimate over the window (from the average chamber), °C. */
  deviationC: number | null;
  /** deviationC minus its normal at the same load band under the same curve, °C; null without a reference window. */
  residualC: number | null;
  /** 1 = coldest (by residual when there is one, else by deviation). */
  rank: number | null;
  /** d(estimate)/d(swirl), °C per degree: the estimate's change when the curve is one degree off. */
  sensitivityCPerDeg: number | null;
}

export interface WhatIfOutcome {
  curve: SwirlPoint[];
  ringsUsed: number;
  /** Rings whose load band had no reference rings: left out of the residuals. */
  ringsWithoutNormal: number;
  coldestChamber: number | null;
  chambers: WhatIfChamber[];
}

/** Width of the load bands of the normal, load fraction. */
export const WHAT_IF_BAND = 0.05;

/** A curve moved by `deg` at every point. */
export function shiftCurve(curve: readonly SwirlPoint[], deg: number): SwirlPoint[] {
  return curve.map(([l, s]) => [l, s + deg] as SwirlPoint);
}

/** Per ring, the chamber estimates (N per ring, NaN for a ring with too few valid readings) under `curve`. */
export function remapRings(config: Pick<UnitConfig, 'thermocouples' | 'chambers' | 'swirl'>, curve: readonly SwirlPoint[], rings: readonly WhatIfRing[]): Float64Array[] {
  const o = defaultAnalysisOptions;
  const tc = thermocoupleAnglesDeg(config);
  const ch = chamberAnglesDeg(config);
  const kernel: KernelSpec = { shape: o.kernel, widthDeg: plumeWidthDeg(config, o.plumeWidthFraction) };
  const m = tc.length;
  const n = ch.length;
  const solvers = new Map<string, ChamberSolver>();
  const values = new Float64Array(m);
  const usable = new Array<boolean>(m);
  const scratchY = new Float64Array(m);
  const scratchFit = new Float64Array(n + 1);
  const out = { chamberDeviationDegC: new Float64Array(n), chamberUncertaintyDegC: new Float64Array(n), ringLevelDegC: 0, fitResidualSdDegC: 0 };
  return rings.map((r) => {
    let valid = 0;
    for (let i = 0; i < m; i++) {
      const v = r.deviationC[i];
      usable[i] = r.validity[i] === 0 && v !== null && v !== undefined && Number.isFinite(v);
      values[i] = usable[i] ? (v as number) : 0;
      if (usable[i]) valid++;
    }
    const est = new Float64Array(n).fill(NaN);
    if (valid < Math.max(o.minValidForChambers, 3)) return est;
    // Loads share a solver per load bin, as in the ring analysis (ring.ts).
    const shift = config.swirl.sense * swirlDeg(curve, Math.round(r.loadFraction / o.loadBinWidth) * o.loadBinWidth);
    const key = `${shift.toFixed(3)}:${usable.map((u) => (u ? 1 : 0)).join('')}`;
    let solver = solvers.get(key);
    if (!solver) solvers.set(key, (solver = buildChamberSolver(tc, ch, shift, usable, kernel, o.ridgeFraction)));
    estimateChambers(solver, values, 0, o.residualFloorDegC, scratchY, scratchFit, out);
    est.set(out.chamberDeviationDegC);
    return est;
  });
}

const bandOf = (load: number) => Math.floor(load / WHAT_IF_BAND);

/** Per load band, the mean estimate of each chamber over the rings. */
function normalByBand(loads: readonly number[], estimates: readonly Float64Array[], n: number): Map<number, Float64Array> {
  const sums = new Map<number, { s: Float64Array; c: Float64Array }>();
  estimates.forEach((e, j) => {
    const b = bandOf(loads[j]);
    let acc = sums.get(b);
    if (!acc) sums.set(b, (acc = { s: new Float64Array(n), c: new Float64Array(n) }));
    for (let k = 0; k < n; k++) if (Number.isFinite(e[k])) {
      acc.s[k] += e[k];
      acc.c[k]++;
    }
  });
  return new Map([...sums].map(([b, { s, c }]) => [b, s.map((v, k) => (c[k] > 0 ? v / c[k] : NaN))]));
}

function meanOf(estimates: readonly Float64Array[], n: number): Array<number | null> {
  return Array.from({ length: n }, (_, k) => {
    let s = 0;
    let c = 0;
    for (const e of estimates) if (Number.isFinite(e[k])) {
      s += e[k];
      c++;
    }
    return c ? s / c : null;
  });
}

/** The window's chamber ranking, residuals and sensitivities under one curve. */
export function whatIfOutcome(
  config: Pick<UnitConfig, 'thermocouples' | 'chambers' | 'swirl'>,
  curve: readonly SwirlPoint[],
  window: readonly WhatIfRing[],
  reference: readonly WhatIfRing[] | null,
): WhatIfOutcome {
  const n = config.chambers.count;
  const est = remapRings(config, curve, window);
  const up = remapRings(config, shiftCurve(curve, 1), window);
  const down = remapRings(config, shiftCurve(curve, -1), window);
  const used = est.filter((e) => e.some(Number.isFinite)).length;
  const deviation = meanOf(est, n);
  const sensitivity = meanOf(up.map((u, j) => u.map((v, k) => (v - down[j][k]) / 2)), n);
  let residual: Array<number | null> = Array(n).fill(null);
  let withoutNormal = 0;
  if (reference && reference.length) {
    const normal = normalByBand(reference.map((r) => r.loadFraction), remapRings(config, curve, reference), n);
    const res: Float64Array[] = [];
    est.forEach((e, j) => {
      const base = normal.get(bandOf(window[j].loadFraction));
      if (!base) {
        withoutNormal++;
        return;
      }
      res.push(e.map((v, k) => v - base[k]));
    });
    residual = meanOf(res, n);
  }
  const by = residual.some((v) => v !== null) ? residual : deviation;
  const order = by.map((v, k) => ({ v, k })).filter((x) => x.v !== null).sort((a, b) => (a.v as number) - (b.v as number));
  const rank = new Map(order.map((x, i) => [x.k, i + 1]));
  return {
    curve: curve.map(([l, s]) => [l, s] as SwirlPoint),
    ringsUsed: used,
    ringsWithoutNormal: withoutNormal,
    coldestChamber: order.length ? order[0].k + 1 : null,
    chambers: Array.from({ length: n }, (_, k) => ({ chamber: k + 1, deviationC: deviation[k], residualC: residual[k], rank: rank.get(k) ?? null, sensitivityCPerDeg: sensitivity[k] })),
  };
}
