/**
 * Start-up analysis, its words: from a time series of rings (shaft speed, load, and when sent
 * the fuel flow and the flame detectors, plus the exhaust ring) Cansight finds each start, its
 * phases with their start times and durations, its outcome, and whether every chamber lit.
 * This file holds the shapes of all that (rings in, start records and events out), the limits
 * (`StartOptions`), the analyser prepared from a unit's configuration, and the detector's state.
 *
 * Phases, in order: cranking → firing (fuel on, expected near 20 % speed) → flame established
 * → warm-up (fuel cut back to about half of the firing flow for a couple of minutes) →
 * acceleration → starter disengaged (near 70 % speed) → full speed no load → synchronised →
 * loading. Outcomes: completed, failed_to_fire, flame_lost_in_warmup, aborted (stopped after
 * the warm-up but before synchronising, e.g. tripped in acceleration), tripped_from_load (a
 * completed start whose run later ended in a trip rather than a normal fired shutdown).
 *
 * Streaming: the detector (start-detector.ts) takes one ring at a time and keeps everything it
 * needs in a plain JSON state (`StartDetectorState`), so a worker can feed rings batch by batch
 * and store the state between batches. Pure: no I/O, no clock; times are ms since 1970 as given
 * by the caller. The rest of the analysis: start-rings.ts (reading one ring), start-phases.ts
 * (a start in progress), start-lighting.ts (did every chamber light), start-record.ts (closing a
 * start), start-counters.ts (fired starts, failed starts, trips, fired hours).
 */
import type { Finding, Grade } from './findings.ts';
import { createRingAnalysis, prepareUnit, type AnalysisOptionsInput, type RingAnalysis, type UnitContext } from './ring.ts';
import type { Reading, UnitConfig } from './types.ts';

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

export type Mode = 'unknown' | 'idle' | 'starting' | 'running' | 'coasting';

export interface LightPoint {
  t: number;
  speed: number;
  mean: number | null;
  spread: number | null;
  ch: (number | null)[] | null;
}

export interface StartInProgress {
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

export interface PrevRing {
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

/** The detector follows a run: of the completed start startId (null: a run found already under way) from fromMs. */
export function enterRun(state: StartDetectorState, startId: string | null, fromMs: number): void {
  state.mode = 'running';
  state.runStartId = startId;
  state.runFromMs = fromMs;
}

/** The detector follows a coast-down, from this ring's speed. */
export function enterCoast(state: StartDetectorState, r: StartRing): void {
  state.mode = 'coasting';
  state.coastMinSpeedPct = r.speedPct;
  state.coastMinMs = r.tMs;
}
