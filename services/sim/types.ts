/**
 * Shapes of the simulator: a simulated unit (its configuration as Cansight is told it, plus the
 * physical truth the simulator uses), its dispatch, its faults, and the ground truth written
 * beside every generated data set. Chambers and thermocouples are numbered from 1 in every
 * field a person or a test reads; arrays are indexed from 0.
 */
import type { SwirlPoint, UnitConfig } from '../core/types.ts';
import type { SiteClimate } from './ambient.ts';

/** A unit's configuration as given to Cansight: the core UnitConfig plus its identity. */
export interface SimUnitConfig extends UnitConfig {
  /** [a-z0-9-]{1,40} */
  id: string;
  name: string;
  site: string;
  /** Configuration family the unit is registered with (units of one design compared side by side). */
  family?: string;
}

export interface SwirlTruth {
  sense: 1 | -1;
  curve: SwirlPoint[];
  /** Swirl while the shaft is below about 95 % speed (low flow during starts and stops). */
  startupDeg?: number;
}

/**
 * A thermocouple replaced by a new one: from `at` on its fixed calibration offset steps by
 * stepFrac times its IEC 60584-1 class 2 tolerance (|stepFrac| ≤ 1), in the direction given
 * unless that would put the new probe outside class 2, then the other way. Not a fault: the unit
 * stays healthy.
 */
export interface ProbeReplacement {
  /** From 1. */
  thermocouple: number;
  at: TimeInput;
  stepFrac: number;
}

/** The physical truth of a unit, which Cansight never sees directly. */
export interface UnitPhysics {
  /** The swirl the gas really has; defaults to the configured one (differs under a wrong-swirl fault). */
  trueSwirl: SwirlTruth;
  /** Plume spread by mixing: standard deviation of the circular kernel as a fraction of the chamber pitch. */
  mixingWidthFrac: number;
  /** Share of a chamber's temperature departure that stays in its plume (the rest mixes round the whole ring). */
  plumeRetention: number;
  /** Fixed chamber-to-chamber fuel-share fingerprint, %, one per chamber (drawn from the seed when absent). */
  fingerprintPct?: number[];
  /** Standard deviation of the fingerprint when drawn, %. */
  fingerprintSigmaPct: number;
  /**
   * Slow wander of each chamber's fingerprint about its fixed value (wear, fuel quality, valve
   * settling), standard deviation, % (0 = fixed fingerprints).
   */
  fingerprintWanderPct: number;
  /** Time scale of the fingerprint wander, days (smooth noise with knots this far apart). */
  fingerprintWanderDays: number;
  /** Thermocouples replaced during the window: from `at` on, the probe reads with a new calibration offset. */
  probeReplacements: ProbeReplacement[];
  /** Per-position gas temperature asymmetry (struts, flow), standard deviation as a fraction of the combustion rise. */
  placementBiasFrac: number;
  /** Shift of the whole ring-mean curve, °C (machines differ). */
  exhaustOffsetC: number;
  /** Reading noise, standard deviation, °C (bounded at ±3.46σ). */
  noiseSigmaC: number;
  /** Fixed per-probe calibration offset, as a fraction of the IEC 60584-1 class 2 tolerance, bound (|e| ≤ this). */
  probeOffsetMaxFrac: number;
  /** Chambers with spark plugs (from 1). */
  igniterChambers: number[];
  /** Chambers with flame detectors (from 1). */
  flameDetectorChambers: number[];
  /** Fuel flow at base load, kg/s (default from rating: 33 % efficiency, 50 MJ/kg). */
  baseFuelKgS?: number;
}

export type DispatchProfile = 'base' | 'cycling' | 'peaking';

export interface DispatchSpec {
  profile: DispatchProfile;
  /** Unplanned trips from load per year (default 4). */
  tripsPerYear?: number;
  /** Load ramp, fraction of rating per minute (default 0.08). */
  rampPerMin?: number;
  /** Cycling: night load fraction (default 0.6). */
  nightLoad?: number;
  /** Peaking: probability of running on a Saturday or Sunday (default 0.25). */
  weekendRunChance?: number;
}

/** Times are ms since 1970 UTC or RFC 3339 strings. */
export type TimeInput = number | string | Date;

export type FaultSpec =
  | { kind: 'tc_open'; thermocouple: number; at: TimeInput; until?: TimeInput; /** reading while open; null = not sent */ readsC?: number | null }
  | { kind: 'tc_drift'; thermocouple: number; at: TimeInput; until?: TimeInput; ratePerDayC: number }
  /** The probe is replaced at `at`: the new one reads offsetC off the old (within its class tolerance). Not a fault of the machine; a maintenance event. */
  | { kind: 'tc_replaced'; thermocouple: number; at: TimeInput; until?: TimeInput; offsetC: number }
  | { kind: 'tc_erratic'; thermocouple: number; at: TimeInput; until?: TimeInput; sigmaC: number }
  | { kind: 'tc_frozen'; thermocouple: number; at: TimeInput; until?: TimeInput }
  /** Fuel share of the chamber falls linearly from 100 % to (100 − depthPct) % over `days`, then stays. */
  | { kind: 'nozzle_plugging'; chamber: number; at: TimeInput; days: number; depthPct: number; /** The nozzles are cleaned then: the chamber is whole again from that instant. */ cleanedAt?: TimeInput }
  /** The chamber's flame goes out (depthFrac of its heat lost, default 1) until `durationH` or the next stop; optional trip after tripAfterS. */
  | { kind: 'flame_loss'; chamber: number; at: TimeInput; durationH?: number; depthFrac?: number; tripAfterS?: number }
  /** The chamber takes excessPct more fuel share, reached over rampDays (0 = sudden). */
  | { kind: 'hot_chamber'; chamber: number; at: TimeInput; excessPct: number; rampDays?: number }
  /**
   * At the first start commanded at or after `at`, the chamber does not light by crossfire. With
   * lateLightS it lights that many seconds after firing; otherwise the start trips on exhaust
   * spread early in acceleration (outcome 'aborted') and the unit retries later.
   */
  | { kind: 'crossfire_failure'; chamber: number; at: TimeInput; lateLightS?: number };

/** A simulated unit: what Cansight is told, what is really there, how it is run, what goes wrong. */
export interface SimUnit {
  config: SimUnitConfig;
  climate: SiteClimate;
  physics?: Partial<UnitPhysics>;
  dispatch: DispatchSpec;
  faults?: FaultSpec[];
}

/** One ring in the API's ring JSON shape (API.md), with the unit it belongs to. */
export interface SimRing {
  unitId: string;
  ts: string;
  loadMw: number;
  ambientC: number;
  ambientKPa: number;
  speedPct: number;
  /** One per thermocouple, thermocouple 1 first; null = not sent (open circuit reported as missing). */
  exhaustC: (number | null)[];
  fuelFlowKgS: number;
  flameDetected?: boolean;
}

/** Many rings of one unit in columns (the fast path). exhaustC is row-major, count × M, NaN = missing. */
export interface RingBatch {
  unitId: string;
  count: number;
  thermocoupleCount: number;
  tsMs: Float64Array;
  loadMw: Float64Array;
  ambientC: Float64Array;
  ambientKPa: Float64Array;
  speedPct: Float64Array;
  fuelFlowKgS: Float64Array;
  flameDetected: Uint8Array;
  exhaustC: Float64Array;
}

export type StartOutcome = 'completed' | 'aborted' | 'tripped_from_load';

/** The true timeline of one start (times RFC 3339), for start-up analysis tests. */
export interface StartTruth {
  id: string;
  unitId: string;
  /** Start command; cranking begins. */
  crankAt: string;
  /** Ignition and firing fuel on, at firingSpeedPct. */
  firingAt: string;
  /** First flame detector sees flame. */
  flameAt: string;
  /** Fuel cut back to warm-up flow. */
  warmupAt: string;
  /** Warm-up ends; fuel rises and the shaft accelerates. */
  accelAt: string;
  /** Starter drops out at starterOffSpeedPct (absent when the start stopped earlier). */
  starterOffAt?: string;
  /** Full speed no load reached. */
  fsnlAt?: string;
  /** Generator breaker closed. */
  syncAt?: string;
  /** Loading begins (a moment after synchronising). */
  loadingAt?: string;
  /** Target load reached. */
  loadedAt?: string;
  /** When an aborted start tripped. */
  trippedAt?: string;
  outcome: StartOutcome;
  firingSpeedPct: number;
  starterOffSpeedPct: number;
  firingFuelKgS: number;
  warmupFuelKgS: number;
  /** Seconds from firing to each chamber lighting, chamber 1 first; null = never lit. */
  chamberLightS: (number | null)[];
  /** Chamber (from 1) that failed to crossfire, when there was one. */
  unlitChamber?: number;
  /** Seconds from the first chamber lighting until every chamber was lit (null if one never lit). */
  crossfireCompleteS: number | null;
}

export interface TripTruth {
  unitId: string;
  at: string;
  /** 'random' for an unplanned trip, or the fault that caused it. */
  cause: string;
  fromLoadMw: number;
}

export interface StopTruth {
  unitId: string;
  /** Unloading begins. */
  unloadAt: string;
  /** Breaker opens. */
  breakerOpenAt: string;
  /** Flame out during coast-down. */
  flameOutAt: string;
}

/** A fault as it really happened, numbered from 1, with what the rings should show. */
export interface FaultTruth {
  kind: FaultSpec['kind'] | 'wrong_swirl' | 'probe_replaced';
  unitId: string;
  at: string;
  until?: string;
  chamber?: number;
  thermocouple?: number;
  params: Record<string, unknown>;
  /** For chamber faults: where the plume lands at base load by the true swirl, and by the configured one, degrees. */
  plumeAngleDegAtBase?: { true: number; configured: number };
  /** For thermocouple faults: the thermocouple's angle, degrees. */
  thermocoupleAngleDeg?: number;
}

export interface GroundTruth {
  unitId: string;
  seed: number;
  from: string;
  to: string;
  config: SimUnitConfig;
  trueSwirl: SwirlTruth;
  faults: FaultTruth[];
  starts: StartTruth[];
  trips: TripTruth[];
  stops: StopTruth[];
}
