/**
 * One ring as start-up analysis reads it: fuel on and fired from the fuel flow and the flame
 * detectors, the ring analysed at the start-up swirl below the start-up speed (readings screened
 * against the ambient), the chamber estimates rounded for the trace, a start's id from its crank
 * instant, and the small numeric helpers the start files share.
 */
import { analyseRing, type RingAnalysis } from './ring.ts';
import type { StartAnalyser, StartOptions, StartRing } from './starts.ts';

export function isNum(v: unknown): v is number {
  return typeof v === 'number' && Number.isFinite(v);
}

export function finiteOrNull(v: number): number | null {
  return Number.isFinite(v) ? v : null;
}

export function round(v: number | null, digits: number): number | null {
  if (v === null || !Number.isFinite(v)) return null;
  const f = 10 ** digits;
  return Math.round(v * f) / f;
}

export function medianOf(xs: readonly number[]): number {
  if (xs.length === 0) return NaN;
  const s = xs.slice().sort((a, b) => a - b);
  const h = s.length >> 1;
  return s.length % 2 ? s[h] : (s[h - 1] + s[h]) / 2;
}

/** Id of a start from its crank instant: "start-" + UTC time to the second, compact. */
export function startIdOf(crankMs: number): string {
  return 'start-' + new Date(Math.floor(crankMs / 1000) * 1000).toISOString().replace(/[-:]/g, '').replace('.000Z', 'Z');
}

/** Fuel on, from the fuel flow; null when not sent. */
export function fuelOnOf(r: StartRing, o: StartOptions): boolean | null {
  return isNum(r.fuelFlowKgS) ? r.fuelFlowKgS > o.fuelOnKgS : null;
}

/** Fired: the flame detectors when sent, else the fuel flow, else unknown. */
export function firedOf(r: StartRing, o: StartOptions): boolean | null {
  if (typeof r.flameDetected === 'boolean') return r.flameDetected;
  return fuelOnOf(r, o);
}

/** Analyses a ring for start purposes (readings screened against the ambient). */
export function analyseStartRing(an: StartAnalyser, r: StartRing): RingAnalysis {
  const o = an.options;
  const m = an.config.thermocouples.count;
  const floor = Math.max(o.absoluteFloorDegC, isNum(r.ambientC) ? r.ambientC - o.belowAmbientDegC : o.absoluteFloorDegC);
  const buf = an.buffer;
  for (let i = 0; i < m; i++) {
    const v = r.exhaustC[i];
    buf[i] = isNum(v) && v >= floor ? v : NaN;
  }
  const startup = !(r.speedPct >= o.startupSwirlBelowSpeedPct);
  const ctx = startup ? an.startupCtx : an.runCtx;
  const load = startup ? 0 : r.loadMw / an.config.ratedPowerMw;
  return analyseRing(ctx, buf, load, an.out);
}

export function chamberArray(a: RingAnalysis): (number | null)[] | null {
  const out: (number | null)[] = [];
  let any = false;
  for (let k = 0; k < a.chamberCount; k++) {
    const v = a.chamberDeviationDegC[k];
    if (Number.isFinite(v)) any = true;
    out.push(Number.isFinite(v) ? Math.round(v * 10) / 10 : null);
  }
  return any ? out : null;
}
