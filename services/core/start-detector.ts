/**
 * The start detector: one ring at a time (`stepStartDetector`), a unit is idle, starting,
 * running or coasting down; a crank begins a start (start-phases.ts follows it), a flame out
 * at speed or a load dropped is a trip, a fired shutdown is a stop. It returns the events each
 * ring completes (a start, a run's end) and keeps its state plain JSON. `feedStartDetector` and
 * `detectStarts` are the batch forms; `applyStartEvents` folds run ends into start records.
 */
import type { UnitConfig } from './types.ts';
import { countFiredTime, countTrip, startCountersOf } from './start-counters.ts';
import { startStep } from './start-phases.ts';
import { firedOf, fuelOnOf, isNum, startIdOf } from './start-rings.ts';
import { createStartAnalyser, enterCoast, enterRun, initialStartState, type Mode, type PrevRing, type StartAnalyser, type StartCounters, type StartDetectorState, type StartEvent, type StartOptions, type StartOptionsInput, type StartRecord, type StartRing } from './starts.ts';

/**
 * Feeds one ring (in time order; a ring at or before the last one is ignored) and returns the
 * events it completes. Mutates and keeps `state` plain JSON.
 */
export function stepStartDetector(an: StartAnalyser, state: StartDetectorState, r: StartRing): StartEvent[] {
  const o = an.options;
  const prev = state.prev;
  if (!isNum(r.tMs) || !isNum(r.speedPct)) return [];
  if (prev && r.tMs <= prev.t) return [];
  const events: StartEvent[] = [];
  let fired = firedOf(r, o);
  // A flame that was on is out only once confirmed: the fuel is off too, or no flame for flameOutConfirmS.
  if (fired === false && prev?.firedSeen) {
    state.flameOffSinceMs ??= r.tMs;
    if (fuelOnOf(r, o) !== false && r.tMs - state.flameOffSinceMs < o.flameOutConfirmS * 1000) fired = true;
  } else if (fired !== false) state.flameOffSinceMs = null;
  const fuel = isNum(r.fuelFlowKgS) ? r.fuelFlowKgS : null;
  const load = isNum(r.loadMw) ? r.loadMw : 0;
  const dtS = prev ? (r.tMs - prev.t) / 1000 : 0;

  let guard = 0;
  let again = true;
  while (again && guard++ < 3) {
    again = false;
    switch (state.mode) {
      case 'unknown': {
        if (fired === true && r.speedPct >= o.tripMinSpeedPct) enterRun(state, null, r.tMs);
        else if (fired === null && r.speedPct >= o.tripMinSpeedPct && load > o.syncLoadFraction * an.config.ratedPowerMw) enterRun(state, null, r.tMs);
        else if (fired !== true && r.speedPct < o.crankSpeedPct) state.mode = 'idle';
        else if (fired === false) enterCoast(state, r);
        break;
      }
      case 'idle': {
        const rising = prev ? r.speedPct > prev.speed : false;
        if (r.speedPct >= o.tripMinSpeedPct && fired !== false) {
          // At speed already at the next ring: the start was not in the data (a gap); the run is followed, no start recorded.
          enterRun(state, null, r.tMs);
        } else if ((r.speedPct >= o.crankSpeedPct && rising) || fired === true) {
          const crankMs = crankInstant(prev, r, o);
          beginStart(an, state, crankMs, r);
          again = true;
        }
        break;
      }
      case 'coasting': {
        if (state.coastMinSpeedPct === null || r.speedPct < state.coastMinSpeedPct) {
          state.coastMinSpeedPct = r.speedPct;
          state.coastMinMs = r.tMs;
        }
        const fuelOn = fuelOnOf(r, o);
        if (r.speedPct < o.crankSpeedPct && fired !== true) {
          state.mode = 'idle';
        } else if (r.speedPct >= o.tripMinSpeedPct && fired === true && (prev?.speed ?? 0) < o.crankSpeedPct) {
          enterRun(state, null, r.tMs);
        } else if (
          (fuelOn === true && !(prev !== null && prev.fuel !== null && prev.fuel > o.fuelOnKgS)) ||
          (fired === true && prev?.fired !== true) ||
          r.speedPct > (state.coastMinSpeedPct ?? 0) + o.crankSpeedPct
        ) {
          // Cranked again before the shaft stopped: the start began where the speed was lowest.
          beginStart(an, state, state.coastMinMs ?? r.tMs, r);
          again = true;
        }
        break;
      }
      case 'starting': {
        const ended = startStep(an, state, r, prev, fired, fuel, load, dtS, events);
        if (ended) again = (state.mode as Mode) === 'running' && fired === false;
        break;
      }
      case 'running': {
        const rated = an.config.ratedPowerMw;
        if (fired === false) {
          // Flame out: a trip when the shaft was still at speed, else the end of a normal coast-down.
          endRun(state, state.flameOffSinceMs ?? r.tMs, Math.max(r.speedPct, prev?.speed ?? 0) >= o.tripMinSpeedPct, events);
          enterCoast(state, r);
        } else if (fired === null && r.speedPct < o.tripMinSpeedPct) {
          // No flame or fuel signal: the shaft left full speed. A trip drops the load it carried; a stop unloads first.
          endRun(state, r.tMs, (state.lastLoadMw ?? 0) > o.tripMinLoadFraction * rated, events);
          enterCoast(state, r);
        }
        break;
      }
    }
  }
  // Fired time: from the flame or fuel signal; without either, from the detector's own view (running, or a start past its flame).
  const firedNow = fired ?? (state.mode === 'running' || (state.mode === 'starting' && state.current?.at.flame_established !== undefined));
  if (prev && prev.firedSeen && firedNow) countFiredTime(state.counters, dtS, o.firedGapMaxS);
  if (state.mode === 'running' && load > o.syncLoadFraction * an.config.ratedPowerMw) state.lastLoadMw = load;
  state.prev = { t: r.tMs, speed: r.speedPct, load, fuel, fired, firedSeen: firedNow };
  if (fired === false) state.flameOffSinceMs = null;
  return events;
}

function endRun(state: StartDetectorState, atMs: number, trip: boolean, events: StartEvent[]): void {
  if (trip) countTrip(state.counters);
  events.push({ type: 'run_end', startId: state.runStartId, atMs, by: trip ? 'trip' : 'stop', outcome: state.runStartId === null ? null : trip ? 'tripped_from_load' : 'completed' });
  state.runStartId = null;
  state.runFromMs = null;
  state.lastLoadMw = null;
}

/** The instant cranking began: back from the first ring above the crank speed along its rise, not before the previous ring. */
function crankInstant(prev: PrevRing | null, r: StartRing, o: StartOptions): number {
  if (!prev) return r.tMs;
  if (r.speedPct <= prev.speed || prev.speed >= o.crankSpeedPct) return prev.t;
  const dt = r.tMs - prev.t;
  const rate = (r.speedPct - prev.speed) / dt;
  if (prev.speed <= 0) return Math.max(prev.t, Math.round(r.tMs - r.speedPct / rate));
  // Already turning at the previous ring: back along the same rise, at most a few ring intervals.
  return Math.max(prev.t - 5 * dt, Math.round(prev.t - prev.speed / rate));
}

function beginStart(an: StartAnalyser, state: StartDetectorState, crankMs: number, r: StartRing): void {
  state.mode = 'starting';
  state.current = {
    id: startIdOf(crankMs),
    crankMs,
    phase: 'cranking',
    at: { cranking: crankMs },
    speedAt: { cranking: state.prev && state.prev.t <= crankMs ? state.prev.speed : 0 },
    maxSpeed: r.speedPct,
    crankMeanDegC: null,
    baseMeanDegC: null,
    firingFuelKgS: null,
    warmupFuel: [],
    lastInBandMs: null,
    flameSource: null,
    fsnlBuf: [],
    fsnlFirstMs: null,
    syncLoadMw: null,
    loadBuf: [],
    loadMaxMw: null,
    loadRiseMs: null,
    light: [],
    lighting: null,
    fsnlSpreads: [],
    trace: [],
    lastTraceMs: -Infinity,
    maxGapS: 0,
  };
  void an;
}

export interface DetectStartsResult {
  starts: StartRecord[];
  counters: StartCounters & { firedHours: number };
  state: StartDetectorState;
}

/** Feeds many rings in time order; returns the events. */
export function feedStartDetector(an: StartAnalyser, state: StartDetectorState, rings: Iterable<StartRing>): StartEvent[] {
  const events: StartEvent[] = [];
  for (const r of rings) {
    const ev = stepStartDetector(an, state, r);
    for (const e of ev) events.push(e);
  }
  return events;
}

/** Applies run_end events to the start records they name (outcome, run end). */
export function applyStartEvents(starts: StartRecord[], events: readonly StartEvent[]): StartRecord[] {
  const byId = new Map(starts.map((s) => [s.id, s]));
  for (const e of events) {
    if (e.type === 'start') {
      if (!byId.has(e.start.id)) starts.push(e.start);
      else Object.assign(byId.get(e.start.id)!, e.start);
      byId.set(e.start.id, e.start);
    } else if (e.startId !== null) {
      const s = byId.get(e.startId);
      if (!s) continue;
      s.runEndMs = e.atMs;
      s.runEndedBy = e.by;
      if (e.outcome === 'tripped_from_load' && s.outcome === 'completed') s.outcome = 'tripped_from_load';
    }
  }
  return starts;
}

/** The batch form: every start in a series of rings, with the counters, and the state to continue from. */
export function detectStarts(config: UnitConfig, rings: Iterable<StartRing>, options: StartOptionsInput = {}, state: StartDetectorState = initialStartState()): DetectStartsResult {
  const an = createStartAnalyser(config, options);
  const events = feedStartDetector(an, state, rings);
  const starts = applyStartEvents([], events);
  return { starts, counters: startCountersOf(state), state };
}
