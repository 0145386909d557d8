/**
 * Did every chamber light? From flame established to the end of the warm-up each ring's chamber
 * estimates are taken at the unit's start-up swirl (swirl.startupDeg, else the curve's
 * lowest-load point, because the flow is low), as deficits relative to the ring's rise since
 * firing. A chamber is lit once its deficit stays small; the crossfire completion time is when
 * every chamber is lit and the ring is uniform within a configured spread. A chamber whose
 * sector stays cold after the others lit is named with the runner-up chamber from
 * attributeChamber (its finding is made in start-record.ts).
 */
import { round } from './start-rings.ts';
import type { ChamberLighting, LightPoint, StartAnalyser, StartInProgress, StartLighting } from './starts.ts';

/**
 * Per-chamber lighting over the window from flame established to windowEndMs: each light
 * point's chamber deficits qₖ = −aₖ / rise (rise = ring mean − mean at firing, points with
 * rise ≥ minRiseDegC); chamber k lit from the first point after which qₖ ≤ litDeficitFraction
 * holds for litHoldS; unlit at the end when its tail-averaged deficit is over the limit, it is
 * the deepest of its neighbours, and every chamber away from it has been lit for
 * unlitAfterOthersS. Crossfire completion: every chamber lit and the spread within
 * crossfireSpreadDegC.
 */
export function computeLighting(an: StartAnalyser, c: StartInProgress, windowEndMs: number): StartLighting | null {
  const o = an.options;
  const n = an.config.chambers.count;
  const flameMs = c.at.flame_established;
  if (flameMs === undefined) return null;
  const base = c.baseMeanDegC;
  const pts = c.light.filter((p) => p.t >= flameMs && p.t <= windowEndMs && p.ch !== null && p.mean !== null && base !== null && p.mean - base >= o.minRiseDegC);
  const chambers: ChamberLighting[] = [];
  if (pts.length === 0 || base === null) {
    for (let k = 0; k < n; k++) chambers.push({ chamber: k + 1, litAfterS: null, endDeviationDegC: null, endDeficitFraction: null });
    return { swirlDeg: an.startupSwirlDeg, windowEndMs, chambers, crossfireCompleteS: null, unlitChambers: [], lateChambers: [] };
  }
  const q = pts.map((p) => p.ch!.map((v) => (v === null ? NaN : -v / (p.mean! - base))));
  const litAt: (number | null)[] = new Array(n).fill(null);
  for (let k = 0; k < n; k++) {
    // Earliest i such that every point from i on within litHoldS is lit, and the last point of the window is lit.
    let candidate: number | null = null;
    for (let i = 0; i < pts.length; i++) {
      const ok = q[i][k] <= o.litDeficitFraction;
      if (!ok) {
        candidate = null;
        continue;
      }
      if (candidate === null) candidate = i;
      if (pts[i].t - pts[candidate].t >= o.litHoldS * 1000) break;
    }
    if (candidate !== null) litAt[k] = pts[candidate].t;
  }
  const tailFrom = windowEndMs - o.tailS * 1000;
  const tail = pts.filter((p) => p.t >= tailFrom);
  const tailIdx = tail.length ? pts.length - tail.length : pts.length - 1;
  const endDev = new Array<number>(n).fill(0);
  const endQ = new Array<number>(n).fill(0);
  const cnt = Math.max(1, pts.length - tailIdx);
  for (let i = tailIdx; i < pts.length; i++) {
    for (let k = 0; k < n; k++) {
      endDev[k] += (pts[i].ch![k] ?? NaN) / cnt;
      endQ[k] += q[i][k] / cnt;
    }
  }
  // A chamber still over the limit at the end (not counted lit), deepest among its neighbours.
  const unlit: number[] = [];
  for (let k = 0; k < n; k++) {
    const l = (k - 1 + n) % n;
    const rr = (k + 1) % n;
    if (!(endQ[k] > o.litDeficitFraction)) continue;
    if (endQ[k] < endQ[l] || endQ[k] < endQ[rr]) continue;
    unlit.push(k);
  }
  // Shoulders of an unlit chamber's plume read cold too: they are not judged on their own.
  const near = (k: number, j: number) => {
    const d = Math.abs(k - j);
    return Math.min(d, n - d) <= 1;
  };
  const confirmed: number[] = [];
  for (const k of unlit) {
    let othersLit = -Infinity;
    let ok = true;
    for (let j = 0; j < n; j++) {
      if (near(k, j)) continue;
      if (litAt[j] === null) ok = false;
      else othersLit = Math.max(othersLit, litAt[j]!);
    }
    if (ok && windowEndMs - othersLit >= o.unlitAfterOthersS * 1000) confirmed.push(k);
  }
  // Shoulder chambers of a confirmed unlit chamber are taken as lit with the rest when they were held cold only by it.
  for (const k of confirmed) {
    litAt[k] = null;
  }
  // Late: among lit chambers, the one lit last, against every chamber not beside it.
  const late: { chamber: number; lateByS: number }[] = [];
  if (confirmed.length === 0) {
    let kLate = -1;
    for (let k = 0; k < n; k++) if (litAt[k] !== null && (kLate < 0 || litAt[k]! > litAt[kLate]! || (litAt[k] === litAt[kLate] && endQ[k] > endQ[kLate]))) kLate = k;
    if (kLate >= 0) {
      let others = -Infinity;
      for (let j = 0; j < n; j++) if (!near(kLate, j) && litAt[j] !== null) others = Math.max(others, litAt[j]!);
      // Of the late chamber and its neighbours, the one that was coldest while the rest were lit.
      const from = others;
      const to = litAt[kLate]!;
      if (Number.isFinite(from) && (to - from) / 1000 > o.lateLightS) {
        const deep = deepestIn(pts, q, from, to, [(kLate - 1 + n) % n, kLate, (kLate + 1) % n]);
        late.push({ chamber: deep + 1, lateByS: Math.round((to - from) / 1000) });
      }
    }
  }
  let crossfire: number | null = null;
  if (confirmed.length === 0 && litAt.every((x) => x !== null)) {
    const allLit = Math.max(...(litAt as number[]));
    for (const p of pts) {
      if (p.t >= allLit && p.spread !== null && p.spread <= o.crossfireSpreadDegC) {
        crossfire = Math.round((p.t - flameMs) / 100) / 10;
        break;
      }
    }
  }
  for (let k = 0; k < n; k++) {
    chambers.push({
      chamber: k + 1,
      litAfterS: litAt[k] === null ? null : Math.round((litAt[k]! - flameMs) / 100) / 10,
      endDeviationDegC: round(endDev[k], 1),
      endDeficitFraction: round(endQ[k], 3),
    });
  }
  return {
    swirlDeg: an.startupSwirlDeg,
    windowEndMs,
    chambers,
    crossfireCompleteS: crossfire,
    unlitChambers: confirmed.map((k) => k + 1),
    lateChambers: late,
  };
}

function deepestIn(pts: LightPoint[], q: number[][], from: number, to: number, ks: number[]): number {
  let best = ks[1];
  let bestQ = -Infinity;
  for (const k of ks) {
    let s = 0, c = 0;
    for (let i = 0; i < pts.length; i++) if (pts[i].t >= from && pts[i].t < to && Number.isFinite(q[i][k])) { s += q[i][k]; c++; }
    const m = c ? s / c : -Infinity;
    if (m > bestQ) { bestQ = m; best = k; }
  }
  return best;
}

/** Mean chamber estimates over the light points in [from, to]. */
export function meanDeviation(pts: LightPoint[], n: number, from: number, to: number): Float64Array {
  const s = new Float64Array(n);
  const c = new Float64Array(n);
  for (const p of pts) {
    if (p.t < from || p.t > to || !p.ch) continue;
    for (let k = 0; k < n; k++) {
      const v = p.ch[k];
      if (v !== null) { s[k] += v; c[k]++; }
    }
  }
  for (let k = 0; k < n; k++) s[k] = c[k] ? s[k] / c[k] : NaN;
  return s;
}
