/** Helpers shared by the start-up analysis tests: simulated rings as the start detector takes them, and comparison with the ground truth. */
import type { StartRing, StartRecord, StartPhase } from '../../services/core/starts.ts';
import type { RingBatch, StartTruth } from '../../services/sim/types.ts';

export interface RingsOptions {
  /** Leave out the flame detector signal. */
  noFlame?: boolean;
  /** Leave out the fuel flow. */
  noFuel?: boolean;
}

/** The rings of a simulated batch, one StartRing at a time (the exhaust array is reused: copy it to keep it). */
export function* startRings(b: RingBatch, opts: RingsOptions = {}): Generator<StartRing> {
  const m = b.thermocoupleCount;
  for (let r = 0; r < b.count; r++) {
    yield {
      tMs: b.tsMs[r],
      speedPct: b.speedPct[r],
      loadMw: b.loadMw[r],
      fuelFlowKgS: opts.noFuel ? null : b.fuelFlowKgS[r],
      flameDetected: opts.noFlame ? null : b.flameDetected[r] === 1,
      ambientC: b.ambientC[r],
      exhaustC: b.exhaustC.subarray(r * m, (r + 1) * m),
    };
  }
}

/** The true instant of each phase in a simulated start, ms (absent phases left out). */
export function truthInstants(t: StartTruth): Partial<Record<StartPhase, number>> {
  const ms = (s: string | undefined) => (s === undefined ? undefined : Date.parse(s));
  const out: Partial<Record<StartPhase, number | undefined>> = {
    cranking: ms(t.crankAt),
    firing: ms(t.firingAt),
    flame_established: ms(t.flameAt),
    warm_up: ms(t.warmupAt),
    acceleration: ms(t.accelAt),
    starter_disengaged: ms(t.starterOffAt),
    full_speed_no_load: ms(t.fsnlAt),
    synchronised: ms(t.syncAt),
    loading: ms(t.loadingAt),
  };
  for (const k of Object.keys(out) as StartPhase[]) if (out[k] === undefined) delete out[k];
  return out as Partial<Record<StartPhase, number>>;
}

/** The detected start nearest a true crank instant (within maxS), or undefined. */
export function matchStart(starts: readonly StartRecord[], t: StartTruth, maxS = 120): StartRecord | undefined {
  const crank = Date.parse(t.crankAt);
  let best: StartRecord | undefined;
  for (const s of starts) if (Math.abs(s.crankMs - crank) <= maxS * 1000 && (!best || Math.abs(s.crankMs - crank) < Math.abs(best.crankMs - crank))) best = s;
  return best;
}

export function phaseStartMs(s: StartRecord, p: StartPhase): number | undefined {
  return s.phases.find((x) => x.phase === p)?.startMs;
}

/** A simulated batch cut down to the rings before `fromMs` and after `toMs` (inclusive of neither end). */
function keep(b: RingBatch, pick: (r: number) => boolean): number[] {
  const rows: number[] = [];
  for (let r = 0; r < b.count; r++) if (pick(r)) rows.push(r);
  return rows;
}

function emptyLike(b: RingBatch, count: number): RingBatch {
  const m = b.thermocoupleCount;
  return {
    unitId: b.unitId, count, thermocoupleCount: m,
    tsMs: new Float64Array(count), loadMw: new Float64Array(count), ambientC: new Float64Array(count), ambientKPa: new Float64Array(count),
    speedPct: new Float64Array(count), fuelFlowKgS: new Float64Array(count), flameDetected: new Uint8Array(count), exhaustC: new Float64Array(count * m),
  };
}

function copyRow(from: RingBatch, r: number, to: RingBatch, j: number): void {
  const m = from.thermocoupleCount;
  to.tsMs[j] = from.tsMs[r]; to.loadMw[j] = from.loadMw[r]; to.ambientC[j] = from.ambientC[r]; to.ambientKPa[j] = from.ambientKPa[r];
  to.speedPct[j] = from.speedPct[r]; to.fuelFlowKgS[j] = from.fuelFlowKgS[r]; to.flameDetected[j] = from.flameDetected[r];
  to.exhaustC.set(from.exhaustC.subarray(r * m, (r + 1) * m), j * m);
}

/**
 * A start that fails, made from a simulated normal start (the simulator has no such fault): the
 * rings before `atMs` are the simulated ones; from `atMs` the flame is out (or never comes), the
 * fuel is off after `fuelOnS`, the shaft coasts down and each thermocouple cools towards the
 * ambient, for `coastS` seconds at 1 s, after which the batch ends. `fuelKgS`: the fuel flow
 * while it stays on (default: the last simulated ring's). `holdReadingsFromMs`: the
 * exhaust readings are held at that ring's values instead of the simulated ones (no flame).
 */
export function failedStartBatch(b: RingBatch, atMs: number, opts: { fuelOnS?: number; fuelKgS?: number; coastS?: number; holdReadingsFromMs?: number } = {}): RingBatch {
  const fuelOnS = opts.fuelOnS ?? 0;
  const coastS = opts.coastS ?? 1200;
  const rows = keep(b, (r) => b.tsMs[r] < atMs);
  const out = emptyLike(b, rows.length + coastS);
  rows.forEach((r, j) => copyRow(b, r, out, j));
  const m = b.thermocoupleCount;
  const last = rows[rows.length - 1];
  const hold = opts.holdReadingsFromMs === undefined ? last : keep(b, (r) => b.tsMs[r] < opts.holdReadingsFromMs!).pop()!;
  const fuel0 = opts.fuelKgS ?? b.fuelFlowKgS[last];
  for (let i = 0; i < coastS; i++) {
    const j = rows.length + i;
    const tS = i;
    out.tsMs[j] = atMs + i * 1000;
    out.loadMw[j] = 0;
    out.ambientC[j] = b.ambientC[last];
    out.ambientKPa[j] = b.ambientKPa[last];
    const holdSpeed = tS < fuelOnS;
    out.speedPct[j] = holdSpeed ? b.speedPct[last] : b.speedPct[last] * Math.exp(-(tS - fuelOnS) / 220);
    out.fuelFlowKgS[j] = tS < fuelOnS ? fuel0 : 0;
    out.flameDetected[j] = 0;
    for (let k = 0; k < m; k++) {
      const x0 = b.exhaustC[hold * m + k];
      const amb = b.ambientC[last];
      out.exhaustC[j * m + k] = Math.round((amb + (x0 - amb) * Math.exp(-tS / 90)) * 10) / 10;
    }
  }
  return out;
}
