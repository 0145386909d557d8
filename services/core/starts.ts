/**
 * Start-up analysis: from a time series of rings (shaft speed, load, and when sent the fuel flow
 * and the flame detectors, plus the exhaust ring) find each start, its phases with their start
 * times and durations, its outcome, and whether every chamber lit.
 *
 * Phases, in order: cranking → firing (fuel on, expected near 20 % speed) → flame established
 * → warm-up (fuel cut back to about half of the firing flow for a couple of minutes) →
 * acceleration → starter disengaged (near 70 % speed) → full speed no load → synchronised →
 * loading. Outcomes: completed, failed_to_fire, flame_lost_in_warmup, aborted (stopped after
 * the warm-up but before synchronising, e.g. tripped in acceleration), tripped_from_load (a
 * completed start whose run later ended in a trip rather than a normal fired shutdown).
 *
 * Lighting: from flame established to the end of the warm-up each ring's chamber estimates are
 * taken at the unit's start-up swirl (swirl.startupDeg, else the curve's lowest-load point,
 * because the flow is low), as deficits relative to the ring's rise since firing. A chamber is
 * lit once its deficit stays small; the crossfire completion time is when every chamber is lit
 * and the ring is uniform within a configured spread. A chamber whose sector stays cold after
 * the others lit gives a `chamber_unlit` finding (with the runner-up chamber from
 * attributeChamber); a failed start gives `start_failed` naming the phase it stopped in.
 *
 * Streaming: `stepStartDetector` takes one ring at a time and keeps everything it needs in a
 * plain JSON state (`StartDetectorState`), so a worker can feed rings batch by batch and store
 * the state between batches; `detectStarts` is the batch form. Pure: no I/O, no clock; times are
 * ms since 1970 as given by the caller. Every limit is in `StartOptions`.
 */
import { attributeChamber, type ChamberAttribution } from './chambers.ts';
import type { Finding, Grade } from './findings.ts';
import { analyseRing, createRingAnalysis, prepareUnit, type AnalysisOptionsInput, type RingAnalysis, type UnitContext } from './ring.ts';
import type { Reading, UnitConfig } from './types.ts';

// ---------------------------------------------------------------------------------------------
// Shapes

export type StartPhase =
  | 'cranking'
  | 'firing'
  | 'flame_established'
  | 'warm_up'
  | 'acceleration'
  | 'starter_disengaged'
  | 'full_speed_no_load'
  | 'synchronised'
  | 'loading';

/** The phases in the order a start passes through them. */
export const START_PHASES: readonly StartPhase[] = [
  'cranking',
  'firing',
  'flame_established',
  'warm_up',
  'acceleration',
  'starter_disengaged',
  'full_speed_no_load',
  'synchronised',
  'loading',
];

export type StartOutcome = 'completed' | 'failed_to_fire' | 'flame_lost_in_warmup' | 'aborted' | 'tripped_from_load';
export const START_OUTCOMES: readonly StartOutcome[] = ['completed', 'failed_to_fire', 'flame_lost_in_warmup', 'aborted', 'tripped_from_load'];
/** Outcomes counted as failed starts. */
export const FAILED_START_OUTCOMES: readonly StartOutcome[] = ['failed_to_fire', 'flame_lost_in_warmup', 'aborted'];

/** One ring as the start detector needs it. exhaustC[i] is thermocouple i+1, °C. */
export interface StartRing {
  tMs: number;
  speedPct: number;
  loadMw: number;
  fuelFlowKgS?: number | null;
  flameDetected?: boolean | null;
  ambientC?: number | null;
  exhaustC: ArrayLike<Reading>;
}

export type StartFindingKind = 'chamber_unlit' | 'start_failed';

/** A finding about one start: the shape of core findings, with the start-up kinds. */
export interface StartFinding extends Omit<Finding, 'kind'> {
  kind: StartFindingKind;
}

export interface StartPhaseTiming {
  phase: StartPhase;
  /** Start of the phase, ms since 1970. */
  startMs: number;
  /** Seconds until the next phase (or the end of the start); null when the start ended in no known instant. */
  durationS: number | null;
  /** Shaft speed at the start of the phase, %. */
  speedPct: number | null;
}

export interface ChamberLighting {
  /** Numbered from 1. */
  chamber: number;
  /** Seconds after flame established when the chamber's sector was lit; null = not lit by the end of the window. */
  litAfterS: number | null;
  /** Chamber estimate at the end of the lighting window (relative to the average chamber), °C. */
  endDeviationDegC: number | null;
  /** Its deficit as a fraction of the ring's rise since firing (0 = as warm as the average chamber). */
  endDeficitFraction: number | null;
}

export interface StartLighting {
  /** Swirl used for the chamber estimates, degrees. */
  swirlDeg: number;
  /** From flame established to this instant (the end of warm-up, or where the start stopped), ms. */
  windowEndMs: number;
  chambers: ChamberLighting[];
  /** Seconds from flame established until every chamber was lit and the ring uniform; null = never. */
  crossfireCompleteS: number | null;
  /** Chambers (from 1) still unlit at the end of the window, after the others had lit. */
  unlitChambers: number[];
  /** Chambers (from 1) that lit, but long after the others. */
  lateChambers: { chamber: number; lateByS: number }[];
}

/** A point of a start's time series, kept for pictures (every ring in the lighting window, sparser elsewhere). */
export interface StartTracePoint {
  tMs: number;
  speedPct: number;
  loadMw: number;
  fuelFlowKgS: number | null;
  flame: boolean | null;
  meanDegC: number | null;
  spreadDegC: number | null;
  /** Chamber estimates (chamber 1 first), °C, or null when not estimable. */
  chamberDegC: (number | null)[] | null;
}

export interface StartRecord {
  /** Stable per unit: derived from the crank instant. */
  id: string;
  crankMs: number;
  /** When the start was over: loaded, failed, or stopped; ms. */
  endMs: number;
  outcome: StartOutcome;
  /** The phase in which a failed start stopped; null for a completed start. */
  stoppedIn: StartPhase | null;
  phases: StartPhaseTiming[];
  firingSpeedPct: number | null;
  starterOffSpeedPct: number | null;
  firingFuelKgS: number | null;
  warmupFuelKgS: number | null;
  /** Which signal gave the flame: the flame detectors, or the exhaust rise (without detectors). */
  flameSource: 'detector' | 'exhaust' | null;
  lighting: StartLighting | null;
  crossfireCompleteS: number | null;
  /** Exhaust spread near the end of warm-up and over full speed no load (medians), °C. */
  spreadEndOfWarmupDegC: number | null;
  spreadFsnlDegC: number | null;
  /** Longest gap between rings during the start, s. */
  maxGapS: number;
  /** The run that followed a completed start: when its flame went out, and how. */
  runEndMs: number | null;
  runEndedBy: 'stop' | 'trip' | null;
  findings: StartFinding[];
  trace: StartTracePoint[];
}

export interface StartCounters {
  /** Starts in which a flame was established. */
  firedStarts: number;
  /** Starts that failed to fire, lost the flame in warm-up or were aborted. */
  failedStarts: number;
  /** Fired shutdowns at speed (trips), other than in a start before full speed no load. */
  trips: number;
  /** Time with flame, seconds. */
  firedSeconds: number;
}

export type StartEvent =
  /** A start is over (insert or replace it by id). */
  | { type: 'start'; start: StartRecord }
  /** A run ended (startId: the completed start it followed, when known). */
  | { type: 'run_end'; startId: string | null; atMs: number; by: 'stop' | 'trip'; outcome: StartOutcome | null };

// ---------------------------------------------------------------------------------------------
// Options

export interface StartOptions {
  /** Speed rising through this begins a start (cranking), % (engineering judgement: above turning gear). */
  crankSpeedPct: number;
  /** A crank that does not fire within this long is not a start (a crank for washing or cooling), s. */
  crankMaxS: number;
  /** Fuel flow above this is "fuel on", kg/s (engineering judgement: above a meter's zero error). */
  fuelOnKgS: number;
  /** A flame seen out while the fuel is still on (or not sent) is taken as out only after this long without it, s (engineering judgement: flame detectors can drop out for a moment). */
  flameOutConfirmS: number;
  /** Fuel on this long without flame: failed to fire, s (engineering judgement). */
  firingTimeoutS: number;
  /** Without flame detectors or fuel flow: a ring-mean rise this far above the crank level is flame, °C. */
  flameExhaustRiseDegC: number;
  /** Fuel at or below this fraction of the firing flow: warm-up has begun (common practice: cut back to about half). */
  warmupCutRatio: number;
  /** Fuel this fraction above the warm-up level: acceleration has begun. */
  accelFuelRiseFraction: number;
  /** Band round the warm-up fuel level: at least this fraction of it … */
  accelFuelBandFraction: number;
  /** … and at least this many robust σ of the warm-up fuel. */
  accelFuelBandSigmas: number;
  /** Without fuel flow: speed this far above the speed at flame is acceleration, % … */
  accelSpeedRisePct: number;
  /** … and it began where the speed last stood within this of the flame-time speed, %. */
  accelSpeedBandPct: number;
  /** Starter drop-out speed, % (common practice, no written source: about 70 %). Rings carry no starter signal, so it is marked where the accelerating shaft passes this speed. */
  starterOffSpeedPct: number;
  /** Speed from which the approach to full speed is followed, % … */
  fsnlFitFromPct: number;
  /** … speed at which the approach is judged over, % … */
  fsnlDetectPct: number;
  /** … the approach is over when the median speed of the last half of this window is within fsnlBandPct of the first half's, s … */
  fsnlSettleS: number;
  /** … full speed is reached within this of the settled speed, % … */
  fsnlBandPct: number;
  /** … and the end of the acceleration (the vertex of a parabola fitted to the approach) may lie this far beyond that crossing, s. */
  fsnlMaxExtrapolateS: number;
  /** Load above this fraction of rating: breaker closed (synchronised). */
  syncLoadFraction: number;
  /** Load this fraction of rating above the load taken at synchronising: loading has begun. */
  loadingRiseFraction: number;
  /** Loading is over when the load has not risen by loadingRiseFraction for this long, s. */
  loadedSettleS: number;
  /** A start still loading after this long is closed as completed, s. */
  loadingMaxS: number;
  /** Flame out at or above this speed is a trip; below it, a normal fired shutdown (coast-down), %. */
  tripMinSpeedPct: number;
  /** Without flame or fuel signals: leaving full speed with more than this fraction of rating last carried is a trip (a normal stop unloads first). */
  tripMinLoadFraction: number;
  /** Fired time is counted across gaps up to this long, s. */
  firedGapMaxS: number;
  /** Below this speed the start-up swirl is used for chamber estimates, % (engineering judgement). */
  startupSwirlBelowSpeedPct: number;
  /** Start-up swirl, degrees, when the unit configures none (default: the curve's lowest-load point). */
  startupSwirlDeg: number | null;
  /** Readings this far below ambient (or below absoluteFloorDegC) are not used during starts, °C. */
  belowAmbientDegC: number;
  absoluteFloorDegC: number;
  /** Ring rise since firing needed before chambers are judged, °C. */
  minRiseDegC: number;
  /** A chamber is lit when its deficit is at most this fraction of the ring's rise. */
  litDeficitFraction: number;
  /** … and stays so for this long, s. */
  litHoldS: number;
  /** The ring is uniform (crossfire complete) when its spread is within this, °C (engineering judgement). */
  crossfireSpreadDegC: number;
  /** A chamber lighting this long after the rest is reported (grade lateGrade), s. */
  lateLightS: number;
  /** A chamber is reported unlit only when the others have been lit this long, s. */
  unlitAfterOthersS: number;
  /** Seconds at the end of the window averaged for the end-of-window chamber state and spread. */
  tailS: number;
  /** Swirl uncertainty during starts for the runner-up likelihood, degrees (engineering judgement: low-flow swirl is less certain). */
  startupSwirlUncertaintyDeg: number;
  /** Grades of the findings. */
  unlitGrade: Grade;
  lateGrade: Grade;
  failedGrade: Record<'failed_to_fire' | 'flame_lost_in_warmup' | 'aborted', Grade>;
  /** Trace points outside the lighting window at most every this many seconds. */
  traceStepS: number;
  /** Most trace points kept per start. */
  maxTracePoints: number;
  /** Ring analysis options (validity, kernel …) for the chamber estimates. */
  analysis: AnalysisOptionsInput;
}

/** Defaults: engineering judgement unless the field's comment says common practice. */
export const defaultStartOptions: StartOptions = {
  crankSpeedPct: 2,
  crankMaxS: 1800,
  fuelOnKgS: 0.005,
  flameOutConfirmS: 3,
  firingTimeoutS: 60,
  flameExhaustRiseDegC: 20,
  warmupCutRatio: 0.8,
  accelFuelRiseFraction: 0.05,
  accelFuelBandFraction: 0.005,
  accelFuelBandSigmas: 4,
  accelSpeedRisePct: 3,
  accelSpeedBandPct: 2,
  starterOffSpeedPct: 70,
  fsnlFitFromPct: 97,
  fsnlDetectPct: 99,
  fsnlSettleS: 10,
  fsnlBandPct: 0.05,
  fsnlMaxExtrapolateS: 10,
  syncLoadFraction: 0.005,
  loadingRiseFraction: 0.005,
  loadedSettleS: 180,
  loadingMaxS: 7200,
  tripMinSpeedPct: 90,
  tripMinLoadFraction: 0.15,
  firedGapMaxS: 900,
  startupSwirlBelowSpeedPct: 95,
  startupSwirlDeg: null,
  belowAmbientDegC: 25,
  absoluteFloorDegC: -45,
  minRiseDegC: 15,
  litDeficitFraction: 0.15,
  litHoldS: 3,
  crossfireSpreadDegC: 30,
  lateLightS: 15,
  unlitAfterOthersS: 10,
  tailS: 10,
  startupSwirlUncertaintyDeg: 10,
  unlitGrade: 'alarm',
  lateGrade: 'warning',
  failedGrade: { failed_to_fire: 'warning', flame_lost_in_warmup: 'warning', aborted: 'alarm' },
  traceStepS: 5,
  maxTracePoints: 1500,
  analysis: {},
};

export type StartOptionsInput = Partial<Omit<StartOptions, 'failedGrade'>> & { failedGrade?: Partial<StartOptions['failedGrade']> };

export function resolveStartOptions(input: StartOptionsInput = {}): StartOptions {
  return { ...defaultStartOptions, ...input, failedGrade: { ...defaultStartOptions.failedGrade, ...input.failedGrade } };
}

/** Start-up swirl of a unit: swirl.startupDeg, else the given default, else the curve's lowest-load point. */
export function startupSwirlDegOf(config: UnitConfig, fallbackDeg: number | null = null): number {
  if (typeof config.swirl.startupDeg === 'number' && Number.isFinite(config.swirl.startupDeg)) return config.swirl.startupDeg;
  if (fallbackDeg !== null && Number.isFinite(fallbackDeg)) return fallbackDeg;
  return config.swirl.curve[0][1];
}

// ---------------------------------------------------------------------------------------------
// Prepared analyser (rebuilt from the configuration; not part of the state)

export interface StartAnalyser {
  readonly config: UnitConfig;
  readonly options: StartOptions;
  /** Chamber estimates at the start-up swirl, and at the unit's own curve. */
  readonly startupCtx: UnitContext;
  readonly runCtx: UnitContext;
  readonly startupSwirlDeg: number;
  readonly buffer: Float64Array;
  readonly out: RingAnalysis;
}

/** Prepares a unit for start analysis. Throws when the configuration cannot be analysed. */
export function createStartAnalyser(config: UnitConfig, options: StartOptionsInput = {}): StartAnalyser {
  const o = resolveStartOptions(options);
  const swirl = startupSwirlDegOf(config, o.startupSwirlDeg);
  // Readings are screened against the ambient before the analysis (start-up rings are cold), so the analysis floor is off.
  const analysis: AnalysisOptionsInput = { ...o.analysis, validity: { ...o.analysis.validity, floorDegC: -273.15 }, swirlUncertaintyDeg: o.startupSwirlUncertaintyDeg };
  const startupConfig: UnitConfig = { ...config, swirl: { sense: config.swirl.sense, curve: [[0, swirl]] } };
  const startupCtx = prepareUnit(startupConfig, analysis);
  const runCtx = prepareUnit(config, analysis);
  return {
    config,
    options: o,
    startupCtx,
    runCtx,
    startupSwirlDeg: swirl,
    buffer: new Float64Array(config.thermocouples.count),
    out: createRingAnalysis(config.thermocouples.count, config.chambers.count),
  };
}

// ---------------------------------------------------------------------------------------------
// State (plain JSON: numbers, strings, booleans, arrays, null)

type Mode = 'unknown' | 'idle' | 'starting' | 'running' | 'coasting';

interface LightPoint {
  t: number;
  speed: number;
  mean: number | null;
  spread: number | null;
  ch: (number | null)[] | null;
}

interface StartInProgress {
  id: string;
  crankMs: number;
  phase: StartPhase;
  at: Partial<Record<StartPhase, number>>;
  speedAt: Partial<Record<StartPhase, number | null>>;
  maxSpeed: number;
  crankMeanDegC: number | null;
  baseMeanDegC: number | null;
  firingFuelKgS: number | null;
  warmupFuel: number[];
  lastInBandMs: number | null;
  flameSource: StartRecord['flameSource'];
  fsnlBuf: number[];
  fsnlFirstMs: number | null;
  syncLoadMw: number | null;
  loadBuf: number[];
  loadMaxMw: number | null;
  loadRiseMs: number | null;
  light: LightPoint[];
  lighting: StartLighting | null;
  fsnlSpreads: number[];
  trace: StartTracePoint[];
  lastTraceMs: number;
  maxGapS: number;
}

interface PrevRing {
  t: number;
  speed: number;
  load: number;
  fuel: number | null;
  fired: boolean | null;
  /** Fired as counted for fired hours (the signal, or the detector's own view without one). */
  firedSeen: boolean;
}

export interface StartDetectorState {
  version: 1;
  mode: Mode;
  prev: PrevRing | null;
  current: StartInProgress | null;
  /** The completed start whose run is in progress (null: none, or the run began before the data). */
  runStartId: string | null;
  runFromMs: number | null;
  coastMinSpeedPct: number | null;
  coastMinMs: number | null;
  /** Last load seen while running above the synchronising level, MW (tells a trip from a stop without flame or fuel signals). */
  lastLoadMw: number | null;
  /** First ring without flame after flame, while the loss awaits confirmation, ms. */
  flameOffSinceMs?: number | null;
  counters: StartCounters;
}

export function initialStartState(): StartDetectorState {
  return {
    version: 1,
    mode: 'unknown',
    prev: null,
    current: null,
    runStartId: null,
    runFromMs: null,
    coastMinSpeedPct: null,
    coastMinMs: null,
    lastLoadMw: null,
    flameOffSinceMs: null,
    counters: { firedStarts: 0, failedStarts: 0, trips: 0, firedSeconds: 0 },
  };
}

// ---------------------------------------------------------------------------------------------
// Helpers

function isNum(v: unknown): v is number {
  return typeof v === 'number' && Number.isFinite(v);
}

function finiteOrNull(v: number): number | null {
  return Number.isFinite(v) ? v : null;
}

function round(v: number | null, digits: number): number | null {
  if (v === null || !Number.isFinite(v)) return null;
  const f = 10 ** digits;
  return Math.round(v * f) / f;
}

function medianOf(xs: readonly number[]): number {
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
function fuelOnOf(r: StartRing, o: StartOptions): boolean | null {
  return isNum(r.fuelFlowKgS) ? r.fuelFlowKgS > o.fuelOnKgS : null;
}

/** Fired: the flame detectors when sent, else the fuel flow, else unknown. */
function firedOf(r: StartRing, o: StartOptions): boolean | null {
  if (typeof r.flameDetected === 'boolean') return r.flameDetected;
  return fuelOnOf(r, o);
}

/** Analyses a ring for start purposes (readings screened against the ambient). */
function analyseStartRing(an: StartAnalyser, r: StartRing): RingAnalysis {
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

function chamberArray(a: RingAnalysis): (number | null)[] | null {
  const out: (number | null)[] = [];
  let any = false;
  for (let k = 0; k < a.chamberCount; k++) {
    const v = a.chamberDeviationDegC[k];
    if (Number.isFinite(v)) any = true;
    out.push(Number.isFinite(v) ? Math.round(v * 10) / 10 : null);
  }
  return any ? out : null;
}

// ---------------------------------------------------------------------------------------------
// The detector

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
  if (prev && prev.firedSeen && firedNow) state.counters.firedSeconds += Math.min(dtS, o.firedGapMaxS);
  if (state.mode === 'running' && load > o.syncLoadFraction * an.config.ratedPowerMw) state.lastLoadMw = load;
  state.prev = { t: r.tMs, speed: r.speedPct, load, fuel, fired, firedSeen: firedNow };
  if (fired === false) state.flameOffSinceMs = null;
  return events;
}

function enterRun(state: StartDetectorState, startId: string | null, fromMs: number): void {
  state.mode = 'running';
  state.runStartId = startId;
  state.runFromMs = fromMs;
}

function enterCoast(state: StartDetectorState, r: StartRing): void {
  state.mode = 'coasting';
  state.coastMinSpeedPct = r.speedPct;
  state.coastMinMs = r.tMs;
}

function endRun(state: StartDetectorState, atMs: number, trip: boolean, events: StartEvent[]): void {
  if (trip) state.counters.trips++;
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

/**
 * One ring of a start in progress. Returns true when the start ended on this ring (the mode
 * has then changed to running or coasting).
 */
function startStep(
  an: StartAnalyser,
  state: StartDetectorState,
  r: StartRing,
  prev: PrevRing | null,
  fired: boolean | null,
  fuel: number | null,
  load: number,
  dtS: number,
  events: StartEvent[],
): boolean {
  const o = an.options;
  const c = state.current!;
  const t = r.tMs;
  if (prev && prev.t >= c.crankMs) c.maxGapS = Math.max(c.maxGapS, dtS);
  c.maxSpeed = Math.max(c.maxSpeed, r.speedPct);
  const a = analyseStartRing(an, r);
  const mean = finiteOrNull(a.spread.meanDegC);
  const spread = finiteOrNull(a.spread.spreadDegC);
  const inLightWindow = c.at.flame_established !== undefined && c.at.acceleration === undefined;
  addTrace(c, r, fuel, fired, mean, spread, inLightWindow ? chamberArray(a) : null, o, inLightWindow);
  const rated = an.config.ratedPowerMw;
  const fuelOn = fuelOnOf(r, o);
  // When the flame went out (the first ring without it, once the loss is confirmed).
  const outAt = state.flameOffSinceMs ?? t;
  const finish = (outcome: StartOutcome, stoppedIn: StartPhase | null, endMs: number): true => {
    finishStart(an, state, outcome, stoppedIn, endMs, events);
    return true;
  };

  switch (c.phase) {
    case 'cranking': {
      if (c.crankMeanDegC === null && mean !== null) c.crankMeanDegC = mean;
      const flameByExhaust = fired === null && mean !== null && c.crankMeanDegC !== null && mean - c.crankMeanDegC >= o.flameExhaustRiseDegC;
      if (fuelOn === true || fired === true || flameByExhaust) {
        c.at.firing = t;
        c.speedAt.firing = r.speedPct;
        c.baseMeanDegC = mean ?? c.crankMeanDegC;
        c.phase = 'firing';
        if (fuel !== null && fuelOn) c.firingFuelKgS = fuel;
        if (fuelOn !== true) {
          // No fuel signal: firing is only seen as the flame.
          c.flameSource = fired === true ? 'detector' : 'exhaust';
          setFlame(c, t, r.speedPct, mean, spread, a);
        } else if (r.flameDetected === true) {
          c.flameSource = 'detector';
          setFlame(c, t, r.speedPct, mean, spread, a);
        }
        return false;
      }
      const fellBack = prev !== null && r.speedPct < o.crankSpeedPct && r.speedPct < c.maxSpeed;
      if (fellBack || t - c.crankMs > o.crankMaxS * 1000) {
        // Cranked without firing: not a start.
        state.current = null;
        state.mode = r.speedPct < o.crankSpeedPct ? 'idle' : 'coasting';
        if (state.mode === 'coasting') enterCoast(state, r);
        return true;
      }
      return false;
    }
    case 'firing': {
      if (fuel !== null && fuelOn) c.firingFuelKgS = Math.max(c.firingFuelKgS ?? 0, fuel);
      const detector = typeof r.flameDetected === 'boolean';
      const flame = detector ? r.flameDetected === true : mean !== null && c.baseMeanDegC !== null && mean - c.baseMeanDegC >= o.flameExhaustRiseDegC;
      if (flame) {
        c.flameSource = detector ? 'detector' : 'exhaust';
        setFlame(c, t, r.speedPct, mean, spread, a);
        return false;
      }
      if (fuelOn === false || t - (c.at.firing ?? t) > o.firingTimeoutS * 1000) return finish('failed_to_fire', 'firing', t);
      return false;
    }
    case 'flame_established':
    case 'warm_up': {
      if (c.phase === 'flame_established' && fuel !== null && fuelOn) c.firingFuelKgS = Math.max(c.firingFuelKgS ?? 0, fuel);
      pushLight(c, t, r.speedPct, mean, spread, a);
      if (fired === false) return finish('flame_lost_in_warmup', c.phase, outAt);
      if (c.phase === 'flame_established' && fuel !== null && c.firingFuelKgS !== null && fuel <= o.warmupCutRatio * c.firingFuelKgS) {
        c.at.warm_up = t;
        c.speedAt.warm_up = r.speedPct;
        c.phase = 'warm_up';
        c.warmupFuel = [fuel];
        c.lastInBandMs = t;
        return false;
      }
      const accelAt = c.phase === 'warm_up' && fuel !== null ? accelByFuel(c, t, fuel, o) : accelBySpeed(c, r.speedPct, o);
      if (accelAt !== null) {
        c.at.acceleration = accelAt;
        c.speedAt.acceleration = speedNear(c, accelAt) ?? r.speedPct;
        c.phase = 'acceleration';
        c.lighting = computeLighting(an, c, accelAt);
        // The trace keeps chamber estimates in the lighting window only; thin the points after it.
        c.light = c.light.filter((p) => p.t <= accelAt);
      }
      return false;
    }
    case 'acceleration':
    case 'starter_disengaged':
    case 'full_speed_no_load':
    case 'synchronised':
    case 'loading': {
      return laterPhases(an, state, c, r, prev, fired, load, spread, rated, outAt, finish);
    }
  }
  return false;
}

function laterPhases(
  an: StartAnalyser,
  state: StartDetectorState,
  c: StartInProgress,
  r: StartRing,
  prev: PrevRing | null,
  fired: boolean | null,
  load: number,
  spread: number | null,
  rated: number,
  outAt: number,
  finish: (outcome: StartOutcome, stoppedIn: StartPhase | null, endMs: number) => true,
): boolean {
  const o = an.options;
  const t = r.tMs;
  const beforeFsnl = c.phase === 'acceleration' || c.phase === 'starter_disengaged';
  if (beforeFsnl) {
    if (c.at.starter_disengaged === undefined && prev && prev.speed < o.starterOffSpeedPct && r.speedPct >= o.starterOffSpeedPct) {
      const f = (o.starterOffSpeedPct - prev.speed) / (r.speedPct - prev.speed);
      c.at.starter_disengaged = Math.round(prev.t + f * (t - prev.t));
      c.speedAt.starter_disengaged = o.starterOffSpeedPct;
      c.phase = 'starter_disengaged';
    }
    if (r.speedPct >= o.fsnlFitFromPct) c.fsnlBuf.push(t, r.speedPct);
    if (c.fsnlFirstMs === null && r.speedPct >= o.fsnlDetectPct) c.fsnlFirstMs = t;
    const synced = load > o.syncLoadFraction * rated;
    const settled = c.fsnlFirstMs !== null && approachSettled(c.fsnlBuf, t, o);
    if (settled || (synced && c.fsnlBuf.length > 0)) {
      const fsnl = fsnlInstant(c.fsnlBuf, o);
      if (c.at.starter_disengaged === undefined) {
        c.at.starter_disengaged = fsnl;
        c.speedAt.starter_disengaged = null;
      }
      c.at.full_speed_no_load = fsnl;
      c.speedAt.full_speed_no_load = speedInBuf(c.fsnlBuf, fsnl) ?? r.speedPct;
      c.phase = 'full_speed_no_load';
      c.fsnlBuf = [];
      // Spreads of the rings already past the full-speed instant (this ring's is added below).
      for (const p of c.trace) if (p.tMs >= fsnl && p.tMs < t && p.spreadDegC !== null) c.fsnlSpreads.push(p.spreadDegC);
    }
    if (fired === false || (fired === null && r.speedPct < c.maxSpeed - 10)) return finish('aborted', c.phase, fired === false ? outAt : t);
    if (c.phase !== 'full_speed_no_load') return false;
  }
  if (c.phase === 'full_speed_no_load') {
    if (spread !== null) c.fsnlSpreads.push(spread);
    if (load > o.syncLoadFraction * rated) {
      c.at.synchronised = t;
      c.speedAt.synchronised = r.speedPct;
      c.syncLoadMw = load;
      c.phase = 'synchronised';
      c.loadBuf = [t, load];
      return false;
    }
    if (fired === false) {
      const trip = Math.max(r.speedPct, prev?.speed ?? 0) >= o.tripMinSpeedPct && r.speedPct >= o.tripMinSpeedPct - 5;
      if (trip) return finish('aborted', 'full_speed_no_load', outAt);
      finish('completed', null, outAt);
      return true;
    }
    return false;
  }
  if (c.phase === 'synchronised') {
    c.loadBuf.push(t, load);
    const rise = o.loadingRiseFraction * rated;
    if (load >= (c.syncLoadMw ?? 0) + rise) {
      const at = loadingInstant(c.loadBuf, c.syncLoadMw ?? 0, c.at.synchronised ?? t);
      c.at.loading = at;
      c.speedAt.loading = r.speedPct;
      c.phase = 'loading';
      c.loadMaxMw = load;
      c.loadRiseMs = t;
      c.loadBuf = [];
      return false;
    }
  } else if (c.phase === 'loading') {
    const rise = o.loadingRiseFraction * rated;
    if (load >= (c.loadMaxMw ?? 0) + rise) {
      c.loadMaxMw = load;
      c.loadRiseMs = t;
    }
    if (t - (c.loadRiseMs ?? t) >= o.loadedSettleS * 1000) return finish('completed', null, c.loadRiseMs ?? t);
  }
  if (t - (c.at.synchronised ?? t) >= o.loadingMaxS * 1000) return finish('completed', null, t);
  if (fired === false || load < o.syncLoadFraction * rated * 0.5) {
    // The run ends (or the breaker opened) before the load settled: the start itself completed.
    finish('completed', null, fired === false ? outAt : t);
    return true;
  }
  void state;
  return false;
}

function setFlame(c: StartInProgress, t: number, speed: number, mean: number | null, spread: number | null, a: RingAnalysis): void {
  c.at.flame_established = t;
  c.speedAt.flame_established = speed;
  c.phase = 'flame_established';
  pushLight(c, t, speed, mean, spread, a);
}

function pushLight(c: StartInProgress, t: number, speed: number, mean: number | null, spread: number | null, a: RingAnalysis): void {
  if (c.light.length && c.light[c.light.length - 1].t === t) return;
  c.light.push({ t, speed, mean: round(mean, 2), spread: round(spread, 2), ch: chamberArray(a) });
}

function addTrace(
  c: StartInProgress,
  r: StartRing,
  fuel: number | null,
  fired: boolean | null,
  mean: number | null,
  spread: number | null,
  ch: (number | null)[] | null,
  o: StartOptions,
  dense: boolean,
): void {
  if (c.trace.length >= o.maxTracePoints) return;
  const sparse = c.phase === 'loading' || c.phase === 'synchronised' ? o.traceStepS * 3 : o.traceStepS;
  if (!dense && r.tMs - c.lastTraceMs < sparse * 1000) return;
  c.lastTraceMs = r.tMs;
  c.trace.push({
    tMs: r.tMs,
    speedPct: round(r.speedPct, 2)!,
    loadMw: round(isNum(r.loadMw) ? r.loadMw : 0, 3)!,
    fuelFlowKgS: round(fuel, 4),
    flame: fired,
    meanDegC: round(mean, 1),
    spreadDegC: round(spread, 1),
    chamberDegC: ch,
  });
}

function speedNear(c: StartInProgress, t: number): number | null {
  let best: LightPoint | null = null;
  for (const p of c.light) if (p.t <= t) best = p;
  return best ? best.speed : null;
}

/** Acceleration from the fuel: once the fuel rises clear of the warm-up level, it began where the fuel last stood in the band round that level. */
function accelByFuel(c: StartInProgress, t: number, fuel: number, o: StartOptions): number | null {
  const level = medianOf(c.warmupFuel);
  const dev = c.warmupFuel.map((x) => Math.abs(x - level));
  const sigma = 1.4826 * medianOf(dev);
  const band = Math.max(o.accelFuelBandFraction * level, o.accelFuelBandSigmas * sigma);
  if (fuel >= level * (1 + o.accelFuelRiseFraction) && fuel > level + band && c.warmupFuel.length >= 3) return c.lastInBandMs ?? t;
  if (fuel <= level + band) {
    c.lastInBandMs = t;
    c.warmupFuel.push(fuel);
  }
  return null;
}

/** Acceleration from the speed alone (no fuel flow): once the speed is clear above its flame-time value, it began where it last stood near that value. */
function accelBySpeed(c: StartInProgress, speed: number, o: StartOptions): number | null {
  const ref = c.speedAt.flame_established ?? c.speedAt.firing;
  if (ref === undefined || ref === null || speed < ref + o.accelSpeedRisePct) return null;
  let at: number | null = null;
  for (const p of c.light) if (p.speed <= ref + o.accelSpeedBandPct) at = p.t;
  return at;
}

/** Speeds of the approach buffer in the last fsnlSettleS, split in halves (earlier, later). */
function settleHalves(buf: number[], t: number, o: StartOptions): [number[], number[]] | null {
  const from = t - o.fsnlSettleS * 1000;
  const mid = t - o.fsnlSettleS * 500;
  const a: number[] = [];
  const b: number[] = [];
  let first = Infinity;
  for (let i = 0; i < buf.length; i += 2) {
    if (buf[i] < from) continue;
    first = Math.min(first, buf[i]);
    (buf[i] < mid ? a : b).push(buf[i + 1]);
  }
  if (a.length === 0 || b.length === 0 || t - first < 0.8 * o.fsnlSettleS * 1000) return null;
  return [a, b];
}

/** The approach to full speed is over when the median speed of the last half window is within fsnlBandPct of the half before. */
function approachSettled(buf: number[], t: number, o: StartOptions): boolean {
  const h = settleHalves(buf, t, o);
  return h !== null && Math.abs(medianOf(h[1]) - medianOf(h[0])) <= o.fsnlBandPct;
}

/**
 * Full speed no load: the settled speed is the median of the latest half window; the crossing is
 * the first point within fsnlBandPct of it; when a parabola fitted to the approach before the
 * crossing has its vertex (where the shaft stops accelerating) shortly after, that vertex.
 */
function fsnlInstant(buf: number[], o: StartOptions): number {
  const n = buf.length / 2;
  if (n === 0) return NaN;
  const lastT = buf[2 * (n - 1)];
  const h = settleHalves(buf, lastT, o);
  const settled = h ? medianOf(h[1]) : buf[2 * (n - 1) + 1];
  let cross = -1;
  for (let i = 0; i < n; i++) {
    if (buf[2 * i + 1] >= settled - o.fsnlBandPct) {
      cross = i;
      break;
    }
  }
  if (cross < 0) return lastT;
  const tc = buf[2 * cross];
  // Quadratic fit s = a + b·x + c·x², x = t − tc (s), over the approach points before the crossing.
  let s0 = 0, s1 = 0, s2 = 0, s3 = 0, s4 = 0, y0 = 0, y1 = 0, y2 = 0;
  for (let i = 0; i < cross; i++) {
    const x = (buf[2 * i] - tc) / 1000;
    const y = buf[2 * i + 1];
    const x2 = x * x;
    s0 += 1; s1 += x; s2 += x2; s3 += x2 * x; s4 += x2 * x2;
    y0 += y; y1 += x * y; y2 += x2 * y;
  }
  if (s0 < 4) return tc;
  const det = s0 * (s2 * s4 - s3 * s3) - s1 * (s1 * s4 - s3 * s2) + s2 * (s1 * s3 - s2 * s2);
  if (!(Math.abs(det) > 1e-12)) return tc;
  const b = (s0 * (y1 * s4 - s3 * y2) - y0 * (s1 * s4 - s3 * s2) + s2 * (s1 * y2 - y1 * s2)) / det;
  const cc = (s0 * (s2 * y2 - y1 * s3) - s1 * (s1 * y2 - y1 * s2) + y0 * (s1 * s3 - s2 * s2)) / det;
  if (!(cc < 0)) return tc;
  const vertexS = -b / (2 * cc);
  if (!(vertexS > 0)) return tc;
  return tc + Math.round(Math.min(vertexS, o.fsnlMaxExtrapolateS) * 1000);
}

function speedInBuf(buf: number[], t: number): number | null {
  let best: number | null = null;
  for (let i = 0; i < buf.length; i += 2) if (buf[i] <= t) best = buf[i + 1];
  return best;
}

/** Loading began where a straight line through the rising load meets the load taken at synchronising. */
function loadingInstant(buf: number[], syncLoad: number, syncMs: number): number {
  const n = buf.length / 2;
  let sx = 0, sy = 0, sxx = 0, sxy = 0, k = 0;
  const last = buf[2 * (n - 1)];
  for (let i = 0; i < n; i++) {
    const y = buf[2 * i + 1];
    if (y <= syncLoad) continue;
    const x = (buf[2 * i] - last) / 1000;
    sx += x; sy += y; sxx += x * x; sxy += x * y; k++;
  }
  if (k < 2) return last;
  const slope = (k * sxy - sx * sy) / (k * sxx - sx * sx);
  const icpt = (sy - slope * sx) / k;
  if (!(slope > 0)) return last;
  const x0 = (syncLoad - icpt) / slope;
  return Math.max(syncMs, Math.min(last, last + Math.round(x0 * 1000)));
}

// ---------------------------------------------------------------------------------------------
// Lighting

/**
 * Per-chamber lighting over the window from flame established to windowEndMs: each light
 * point's chamber deficits qₖ = −aₖ / rise (rise = ring mean − mean at firing, points with
 * rise ≥ minRiseDegC); chamber k lit from the first point after which qₖ ≤ litDeficitFraction
 * holds for litHoldS; unlit at the end when its tail-averaged deficit is over the limit, it is
 * the deepest of its neighbours, and every chamber away from it has been lit for
 * unlitAfterOthersS. Crossfire completion: every chamber lit and the spread within
 * crossfireSpreadDegC.
 */
function computeLighting(an: StartAnalyser, c: StartInProgress, windowEndMs: number): StartLighting | null {
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
function meanDeviation(pts: LightPoint[], n: number, from: number, to: number): Float64Array {
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

// ---------------------------------------------------------------------------------------------
// Closing a start

function finishStart(an: StartAnalyser, state: StartDetectorState, outcome: StartOutcome, stoppedIn: StartPhase | null, endMs: number, events: StartEvent[]): void {
  const c = state.current!;
  const o = an.options;
  if (c.at.flame_established !== undefined && c.lighting === null) c.lighting = computeLighting(an, c, endMs);
  const phases: StartPhaseTiming[] = [];
  const known = START_PHASES.filter((p) => c.at[p] !== undefined);
  for (let i = 0; i < known.length; i++) {
    const p = known[i];
    const start = c.at[p]!;
    const next = i + 1 < known.length ? c.at[known[i + 1]]! : endMs;
    const sp = c.speedAt[p];
    phases.push({ phase: p, startMs: start, durationS: Number.isFinite(next) ? Math.round((next - start) / 100) / 10 : null, speedPct: typeof sp === 'number' ? round(sp, 2) : null });
  }
  const warmEnd = c.at.acceleration ?? endMs;
  const tailSpreads = c.light.filter((p) => p.t <= warmEnd && p.t >= warmEnd - o.tailS * 1000 && p.spread !== null).map((p) => p.spread!);
  const record: StartRecord = {
    id: c.id,
    crankMs: c.crankMs,
    endMs,
    outcome,
    stoppedIn,
    phases,
    firingSpeedPct: round(c.speedAt.firing ?? NaN, 2),
    starterOffSpeedPct: c.at.starter_disengaged !== undefined ? round(c.speedAt.starter_disengaged ?? NaN, 2) : null,
    firingFuelKgS: round(c.firingFuelKgS, 4),
    warmupFuelKgS: c.warmupFuel.length ? round(medianOf(c.warmupFuel), 4) : null,
    flameSource: c.flameSource,
    lighting: c.lighting,
    crossfireCompleteS: c.lighting?.crossfireCompleteS ?? null,
    spreadEndOfWarmupDegC: c.at.warm_up !== undefined && c.at.acceleration !== undefined && tailSpreads.length ? round(medianOf(tailSpreads), 1) : null,
    spreadFsnlDegC: c.fsnlSpreads.length ? round(medianOf(c.fsnlSpreads), 1) : null,
    maxGapS: Math.round(c.maxGapS * 10) / 10,
    runEndMs: null,
    runEndedBy: null,
    findings: [],
    trace: c.trace,
  };
  record.findings = startFindings(an, c, record);
  if (c.at.flame_established !== undefined) state.counters.firedStarts++;
  if (FAILED_START_OUTCOMES.includes(outcome)) state.counters.failedStarts++;
  events.push({ type: 'start', start: record });
  state.current = null;
  if (outcome === 'completed') enterRun(state, c.id, c.at.flame_established ?? endMs);
  else {
    state.mode = 'coasting';
    state.coastMinSpeedPct = state.prev?.speed ?? null;
    state.coastMinMs = endMs;
  }
}

const PHASE_WORDS: Record<StartPhase, string> = {
  cranking: 'cranking',
  firing: 'firing',
  flame_established: 'just after flame was established',
  warm_up: 'warm-up',
  acceleration: 'acceleration',
  starter_disengaged: 'acceleration after the starter disengaged',
  full_speed_no_load: 'full speed no load',
  synchronised: 'synchronising',
  loading: 'loading',
};

function startFindings(an: StartAnalyser, c: StartInProgress, rec: StartRecord): StartFinding[] {
  const o = an.options;
  const n = an.config.chambers.count;
  const out: StartFinding[] = [];
  const L = rec.lighting;
  const pitch = 360 / n;
  const attr: ChamberAttribution = { chamber: 0, likelihood: NaN, runnerUpChamber: null, runnerUpLikelihood: NaN };
  const flameMs = c.at.flame_established ?? rec.crankMs;
  if (L) {
    const lit = L.chambers.map((x) => (x.litAfterS === null ? null : flameMs + x.litAfterS * 1000));
    const othersLitMs = (k: number) => {
      let t = -Infinity;
      for (let j = 0; j < n; j++) {
        const d = Math.abs(j - k);
        if (Math.min(d, n - d) <= 1) continue;
        if (lit[j] !== null) t = Math.max(t, lit[j]!);
      }
      return t;
    };
    for (const ch of L.unlitChambers) {
      const k = ch - 1;
      const from = othersLitMs(k);
      const dev = meanDeviation(c.light, n, from, L.windowEndMs);
      attributeChamber(dev, k, pitch, o.startupSwirlUncertaintyDeg, attr);
      const endDev = L.chambers[k].endDeviationDegC;
      out.push({
        kind: 'chamber_unlit',
        grade: o.unlitGrade,
        chamber: ch,
        thermocouple: null,
        likelihood: round(attr.likelihood, 3),
        runnerUpChamber: attr.runnerUpChamber,
        runnerUpLikelihood: round(attr.runnerUpLikelihood, 3),
        evidence: {
          startId: rec.id,
          coldForS: Math.round((L.windowEndMs - from) / 1000),
          deviationDegC: round(dev[k], 1),
          endDeviationDegC: endDev,
          endDeficitFraction: L.chambers[k].endDeficitFraction,
          startupSwirlDeg: L.swirlDeg,
          windowEnd: new Date(L.windowEndMs).toISOString(),
        },
        baselineVersion: null,
        message: `chamber ${ch} did not light during the start: its sector stayed cold for ${Math.round((L.windowEndMs - from) / 1000)} s after the other chambers lit`,
        advice: `before the next start, check chamber ${ch} crossfire tubes and fuel nozzle (and its igniter or flame detector if it has one); borescope chamber ${ch} at the next opportunity`,
      });
    }
    for (const late of L.lateChambers) {
      const k = late.chamber - 1;
      const litMs = lit[k] ?? flameMs + late.lateByS * 1000;
      const dev = meanDeviation(c.light, n, litMs - late.lateByS * 1000, litMs);
      attributeChamber(dev, k, pitch, o.startupSwirlUncertaintyDeg, attr);
      out.push({
        kind: 'chamber_unlit',
        grade: o.lateGrade,
        chamber: late.chamber,
        thermocouple: null,
        likelihood: round(attr.likelihood, 3),
        runnerUpChamber: attr.runnerUpChamber,
        runnerUpLikelihood: round(attr.runnerUpLikelihood, 3),
        evidence: { startId: rec.id, lateByS: late.lateByS, deviationDegC: round(dev[k], 1), startupSwirlDeg: L.swirlDeg },
        baselineVersion: null,
        message: `chamber ${late.chamber} lit ${late.lateByS} s after the other chambers (slow crossfire)`,
        advice: `check chamber ${late.chamber} crossfire tubes at the next opportunity; watch its lighting at the next starts`,
      });
    }
  }
  if (rec.outcome === 'failed_to_fire' || rec.outcome === 'flame_lost_in_warmup' || rec.outcome === 'aborted') {
    const where = rec.stoppedIn ?? 'cranking';
    const what =
      rec.outcome === 'failed_to_fire' ? 'failed to fire: fuel was on but no flame was established'
      : rec.outcome === 'flame_lost_in_warmup' ? `lost its flame in ${PHASE_WORDS[where]}`
      : `was aborted in ${PHASE_WORDS[where]}`;
    const unlit = L?.unlitChambers ?? [];
    out.push({
      kind: 'start_failed',
      grade: o.failedGrade[rec.outcome],
      // One condition per unit: the chamber a failed start points to is in the evidence and in its chamber_unlit finding.
      chamber: null,
      thermocouple: null,
      likelihood: null,
      runnerUpChamber: null,
      runnerUpLikelihood: null,
      evidence: {
        startId: rec.id,
        outcome: rec.outcome,
        stoppedIn: where,
        crankAt: new Date(rec.crankMs).toISOString(),
        endedAt: new Date(rec.endMs).toISOString(),
        firingSpeedPct: rec.firingSpeedPct,
        maxSpeedPct: round(c.maxSpeed, 1),
        unlitChambers: unlit.length ? unlit.join(',') : null,
      },
      baselineVersion: null,
      message: `the start at ${new Date(rec.crankMs).toISOString()} ${what}`,
      advice:
        rec.outcome === 'failed_to_fire'
          ? "check the igniters, the fuel supply and the flame detectors before the next attempt; purge as the site's procedure requires"
          : unlit.length
            ? `see the chamber ${unlit.join(', ')} finding: a chamber that does not light is the likely cause; check its crossfire tubes before the next start`
            : "review the unit's own start sequence record and alarms for the cause before the next attempt",
    });
  }
  return out;
}

// ---------------------------------------------------------------------------------------------
// Batch form

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

/** Counters of a detector state, with fired hours. */
export function startCountersOf(state: StartDetectorState): StartCounters & { firedHours: number } {
  return { ...state.counters, firedHours: Math.round((state.counters.firedSeconds / 3600) * 100) / 100 };
}
