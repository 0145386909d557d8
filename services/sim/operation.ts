/**
 * How a simulated unit is run: a plan per local day (dispatch profile, random trips, fault-made
 * trips), turned into a timeline of segments: running on the grid, a start-up (crank, purge,
 * firing, flame, warm-up, acceleration, starter drop-out, full speed no load, synchronise), a
 * normal stop (breaker open, coast down with flame to flame-out) and coasting with no flame.
 * Transients are stepped at 1 s and kept as tracks; everything is a pure function of
 * (unit, seed, day), so any window agrees with any other.
 */
import { ambientC, ambientKPa, type SiteClimate } from './ambient.ts';
import { ringMeanC } from './exhaust-model.ts';
import { combineKeys, Stream } from './rng.ts';
import type { DispatchSpec, StartOutcome } from './types.ts';

export const SECOND_MS = 1000;
export const MINUTE_MS = 60_000;
export const HOUR_MS = 3_600_000;
export const DAY_MS = 86_400_000;

/** A load setpoint at or above this means "base load": as much as the ambient allows. */
export const BASE_SETPOINT = 1.2;
/** Load picked up when the breaker closes, fraction of rating (from memory). */
export const SYNC_LOAD = 0.05;

// Start-up values. Firing near 20 % speed, warm-up at about half the firing fuel flow for a
// couple of minutes and starter drop-out near 70 % speed are common practice for an older
// heavy-duty unit (no written source; common practice). The other durations and
// flows below are from memory, order of magnitude only.
export const START_VALUES = {
  firingSpeedPct: [19, 21.5],
  crankS: [30, 45],
  purgeS: [40, 70],
  ignitionDelayS: [1, 3],
  crossfireTubeS: [0.4, 1.8],
  flameDetectorDelayS: 0.5,
  firingHoldS: [6, 10],
  warmupS: [100, 140],
  warmupFuelRatio: [0.47, 0.53],
  /** Firing fuel flow as a fraction of base-load fuel flow. */
  firingFuelFrac: 0.075,
  /** Fuel flow at full speed no load as a fraction of base-load fuel flow. */
  fsnlFuelFrac: 0.25,
  starterOffSpeedPct: [68, 72],
  accelS: [330, 480],
  fsnlHoldS: [60, 180],
  /** Exhaust thermocouple and gas-path lag during transients, s. */
  exhaustLagS: 12,
  /** Time for a newly lit chamber's plume to build at the thermocouples, s. */
  chamberLightLagS: 3,
} as const;

// Coast-down: speed time constant with no drive, flame-out speed in a normal stop, and how the
// exhaust cools once the flame is out (fast gas part, slow metal part). From memory.
export const COAST_SPEED_TAU_S = 220;
export const FLAME_OUT_SPEED_PCT: [number, number] = [30, 40];
const COOL_FAST_S = 90;
const COOL_SLOW_S = 2700;

/** Air flow through the machine at a shaft speed, relative to full speed (low-speed floor from memory). */
export function relativeAirFlow(speedPct: number): number {
  const n = speedPct / 100;
  return 0.3 + 0.7 * n * n;
}

/** Exhaust mean towards which a fired, unloaded machine settles, °C: ambient + A·fuel/air, A set so full speed no load matches the ring-mean model. */
export function unloadedExhaustTargetC(fuelFrac: number, speedPct: number, ambC: number, ambKPa: number, offsetC: number): number {
  const fsnl = ringMeanC(0, ambC, ambKPa, offsetC);
  const a = (fsnl - ambC) / START_VALUES.fsnlFuelFrac;
  return ambC + (a * fuelFrac) / relativeAirFlow(speedPct);
}

/** Exhaust mean after flame-out, °C, τ seconds after it, from tFoC at flame-out. */
export function coolingExhaustC(tFoC: number, ambC: number, tauS: number): number {
  if (!Number.isFinite(tFoC)) return ambC;
  return ambC + (tFoC - ambC) * (0.6 * Math.exp(-tauS / COOL_FAST_S) + 0.4 * Math.exp(-tauS / COOL_SLOW_S));
}

/** A transient sampled every second: speed %, fuel (fraction of base fuel), exhaust mean °C. */
export interface Track {
  t0: number;
  speedPct: Float64Array;
  fuelFrac: Float64Array;
  meanC: Float64Array;
}

export function trackValue(a: Float64Array, t0: number, tMs: number): number {
  const x = (tMs - t0) / SECOND_MS;
  if (x <= 0) return a[0];
  const i = Math.floor(x);
  if (i >= a.length - 1) return a[a.length - 1];
  const f = x - i;
  return a[i] + (a[i + 1] - a[i]) * f;
}

export interface StartPlan {
  crankAt: number;
  firingAt: number;
  flameAt: number;
  warmupAt: number;
  accelAt: number;
  starterOffAt: number | null;
  fsnlAt: number | null;
  syncAt: number | null;
  trippedAt: number | null;
  firingSpeedPct: number;
  starterOffSpeedPct: number;
  firingFuelFrac: number;
  warmupFuelFrac: number;
  /** Seconds from firing to each chamber lighting (index 0 = chamber 1); Infinity = never. */
  lightS: Float64Array;
  unlitChamber: number | null;
  track: Track;
  targetLoad: number;
  outcome: StartOutcome;
  loadedAt: number | null;
  lateLight: boolean;
}

export interface StopPlan {
  unloadAt: number;
  breakerOpenAt: number;
  flameOutAt: number;
  track: Track;
}

export type Segment =
  | { kind: 'run'; from: number; to: number; kt: number[]; kl: number[]; fastUntil: number }
  | { kind: 'start'; from: number; to: number; plan: StartPlan }
  | { kind: 'stopping'; from: number; to: number; plan: StopPlan }
  | { kind: 'coast'; from: number; to: number; flameOffAt: number; tFoC: number; speed0: number };

export interface TripEvent {
  at: number;
  cause: string;
  fromLoad: number;
}

export interface CrossfireOrder {
  chamber: number;
  /** null: the start trips on spread early in acceleration. */
  lateLightS: number | null;
  at: number;
}

export interface OperationContext {
  unitKey: number;
  climate: SiteClimate;
  dispatch: DispatchSpec;
  chamberCount: number;
  igniters: number[];
  detectors: number[];
  exhaustOffsetC: number;
  /** Trips caused by faults (flame loss with a trip), ms. */
  faultTrips: { at: number; cause: string }[];
  /** Crossfire failures, each applied to the first start commanded at or after `at`. */
  crossfire: CrossfireOrder[];
}

type PlanEvent =
  | { type: 'start'; at: number; target: number }
  | { type: 'stop'; at: number }
  | { type: 'trip'; at: number; cause: string }
  | { type: 'setpoint'; at: number; target: number };

/** Local day index of a time at a site. */
export function localDay(climate: SiteClimate, tMs: number): number {
  return Math.floor((tMs + climate.utcOffsetH * HOUR_MS) / DAY_MS);
}

/** UTC ms at which local day d begins. */
export function localDayStart(climate: SiteClimate, d: number): number {
  return d * DAY_MS - climate.utcOffsetH * HOUR_MS;
}

/** The dispatcher's plan for one local day, without fault effects. Day of week: 1970-01-01 was a Thursday. */
function rawDayPlan(ctx: OperationContext, d: number): { running: boolean; initial: number; events: PlanEvent[] } {
  const s = new Stream(combineKeys(ctx.unitKey, 0xda7, d));
  const t0 = localDayStart(ctx.climate, d);
  const h = (hours: number) => t0 + Math.round(hours * HOUR_MS / SECOND_MS) * SECOND_MS;
  const dow = (((d + 4) % 7) + 7) % 7; // 0 = Sunday
  const weekend = dow === 0 || dow === 6;
  const pTrip = (ctx.dispatch.tripsPerYear ?? 4) / 365;
  const events: PlanEvent[] = [];
  const profile = ctx.dispatch.profile;
  if (profile === 'peaking') {
    const runs = !weekend || s.chance(ctx.dispatch.weekendRunChance ?? 0.25);
    const startH = s.uniform(5.5, 7.5);
    const stopH = s.uniform(19.5, 21.5);
    const target = s.chance(0.6) ? BASE_SETPOINT : s.uniform(0.8, 0.98);
    const trip = s.chance(pTrip);
    const tripH = s.uniform(startH + 2, stopH - 1);
    if (runs) {
      events.push({ type: 'start', at: h(startH), target });
      if (trip) events.push({ type: 'trip', at: h(tripH), cause: 'random' });
      events.push({ type: 'stop', at: h(stopH) });
    }
    return { running: false, initial: 0, events };
  }
  const night = ctx.dispatch.nightLoad ?? 0.6;
  let initial = BASE_SETPOINT;
  let dayTarget = BASE_SETPOINT;
  if (profile === 'cycling') {
    initial = night;
    dayTarget = weekend ? s.uniform(0.7, 0.85) : s.chance(0.5) ? BASE_SETPOINT : s.uniform(0.88, 1.0);
    events.push({ type: 'setpoint', at: h(s.uniform(5.5, 7)), target: dayTarget });
    events.push({ type: 'setpoint', at: h(s.uniform(21, 22.5)), target: night });
  }
  if (s.chance(pTrip)) {
    const tripH = s.uniform(1, 17);
    events.push({ type: 'trip', at: h(tripH), cause: 'random' });
    events.push({ type: 'start', at: h(tripH + s.uniform(1.5, 4)), target: dayTarget });
  }
  return { running: true, initial, events };
}

/** Time of the first start commanded at or after t (searching up to 60 days ahead), or null. */
function firstStartAtOrAfter(ctx: OperationContext, t: number): number | null {
  const d0 = localDay(ctx.climate, t);
  for (let d = d0; d < d0 + 60; d++) {
    const starts = rawDayPlan(ctx, d).events.filter((e) => e.type === 'start' && e.at >= t).map((e) => e.at);
    if (starts.length) return Math.min(...starts);
  }
  return null;
}

function interpKnots(kt: number[], kl: number[], t: number): number {
  const n = kt.length;
  if (t <= kt[0]) return kl[0];
  if (t >= kt[n - 1]) return kl[n - 1];
  let lo = 0, hi = n - 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (kt[mid] <= t) lo = mid; else hi = mid;
  }
  const f = kt[hi] === kt[lo] ? 1 : (t - kt[lo]) / (kt[hi] - kt[lo]);
  return kl[lo] + (kl[hi] - kl[lo]) * f;
}

/** Load setpoint (fraction; ≥ 1.2 means base) of a run segment at t. */
export function runSetpoint(seg: { kt: number[]; kl: number[] }, t: number): number {
  return interpKnots(seg.kt, seg.kl, t);
}

/** Actual load fraction of a run segment at t: the setpoint, limited by what the ambient allows. */
export function runLoad(ctx: OperationContext, seg: { kt: number[]; kl: number[] }, t: number, baseLimit: (t: number) => number): number {
  return Math.min(runSetpoint(seg, t), baseLimit(t));
}

function setRamp(kt: number[], kl: number[], at: number, from: number, target: number, ratePerMin: number): number {
  while (kt.length && kt[kt.length - 1] > at) { kt.pop(); kl.pop(); }
  kt.push(at); kl.push(from);
  const end = at + Math.round((Math.abs(target - from) / ratePerMin) * MINUTE_MS);
  kt.push(end); kl.push(target);
  return end;
}

/** Steps a start-up at 1 s. */
function planStart(ctx: OperationContext, crankAt: number, target: number, order: CrossfireOrder | null): StartPlan {
  const V = START_VALUES;
  const s = new Stream(combineKeys(ctx.unitKey, 0x57a7, crankAt / SECOND_MS));
  const u = (r: readonly [number, number] | readonly number[]) => s.uniform(r[0], r[1]);
  const firingSpeed = u(V.firingSpeedPct);
  const crankS = u(V.crankS);
  const purgeS = u(V.purgeS);
  const firingS = Math.round(crankS + purgeS);
  const n = ctx.chamberCount;
  // Lighting: igniter chambers first, then along the ring through crossfire tubes.
  const light = new Float64Array(n).fill(Infinity);
  const ign = u(V.ignitionDelayS);
  for (const c of ctx.igniters) light[c - 1] = ign + s.uniform(0, 0.3);
  const tube = new Float64Array(n); // tube between k and k+1
  for (let k = 0; k < n; k++) tube[k] = u(V.crossfireTubeS);
  const unlit = order ? order.chamber - 1 : -1;
  if (unlit >= 0) light[unlit] = Infinity;
  for (let pass = 0; pass < n; pass++) {
    for (let k = 0; k < n; k++) {
      if (k === unlit) continue;
      const a = (k + n - 1) % n, b = (k + 1) % n;
      const viaA = light[a] + tube[a];
      const viaB = light[b] + tube[k];
      const best = Math.min(viaA, viaB);
      if (best < light[k]) light[k] = best;
    }
  }
  let detect = Infinity;
  for (const c of ctx.detectors) detect = Math.min(detect, light[c - 1]);
  if (!Number.isFinite(detect)) detect = Math.min(...Array.from(light).filter(Number.isFinite));
  const flameS = firingS + detect + V.flameDetectorDelayS;
  const warmupStartS = flameS + u(V.firingHoldS);
  const warmupS = u(V.warmupS);
  const accelStartS = warmupStartS + warmupS;
  const accelS = u(V.accelS);
  const fsnlS = accelStartS + accelS;
  const syncS = fsnlS + u(V.fsnlHoldS);
  const starterOffPct = u(V.starterOffSpeedPct);
  const firingFuel = V.firingFuelFrac * s.uniform(0.95, 1.05);
  const warmFuel = firingFuel * u(V.warmupFuelRatio);
  let lateLight = false;
  if (order && order.lateLightS !== null) {
    light[unlit] = order.lateLightS;
    lateLight = true;
  }
  const aborted = !!order && order.lateLightS === null;
  const tripS = aborted ? Math.round(accelStartS + s.uniform(20, 60)) : null;
  const endS = Math.ceil(tripS ?? syncS);
  const len = endS + 1;
  const speed = new Float64Array(len), fuel = new Float64Array(len), mean = new Float64Array(len);
  const warmSpeed = firingSpeed + 1.5;
  const speedAt = (x: number): number => {
    if (x < crankS) return (firingSpeed * (1 - Math.exp((-3 * x) / crankS))) / (1 - Math.exp(-3));
    if (x < warmupStartS) return firingSpeed;
    if (x < accelStartS) return firingSpeed + 1.5 * ((x - warmupStartS) / warmupS);
    if (x < fsnlS) { const v = (x - accelStartS) / accelS; return warmSpeed + (100 - warmSpeed) * v * v * (3 - 2 * v); }
    return 100;
  };
  const fuelAt = (x: number, sp: number): number => {
    if (x < firingS) return 0;
    if (x < warmupStartS) return firingFuel;
    if (x < accelStartS) return warmFuel;
    const f = Math.max(0, (sp - warmSpeed) / (100 - warmSpeed));
    return warmFuel + (V.fsnlFuelFrac - warmFuel) * Math.pow(f, 0.8);
  };
  let m = NaN;
  const lag = 1 - Math.exp(-1 / V.exhaustLagS);
  for (let i = 0; i < len; i++) {
    const t = crankAt + i * SECOND_MS;
    const aC = ambientC(ctx.climate, t), aK = ambientKPa(ctx.climate, t);
    if (Number.isNaN(m)) m = aC;
    const sp = speedAt(i);
    const wf = fuelAt(i, sp);
    const target = wf > 0 ? unloadedExhaustTargetC(wf, sp, aC, aK, ctx.exhaustOffsetC) : aC;
    m += (target - m) * lag;
    speed[i] = sp; fuel[i] = wf; mean[i] = m;
  }
  // Starter drop-out: the instant the accelerating shaft passes starterOffPct (bisection on speedAt).
  let starterOffS: number | null = null;
  if (!aborted || (tripS !== null && speedAt(tripS) >= starterOffPct)) {
    let lo = accelStartS, hi = fsnlS;
    for (let k = 0; k < 50; k++) { const mid = (lo + hi) / 2; if (speedAt(mid) >= starterOffPct) hi = mid; else lo = mid; }
    starterOffS = hi;
  }
  const at = (x: number) => crankAt + Math.round(x * SECOND_MS);
  return {
    crankAt,
    firingAt: at(firingS),
    flameAt: at(flameS),
    warmupAt: at(warmupStartS),
    accelAt: at(accelStartS),
    starterOffAt: starterOffS === null ? null : at(starterOffS),
    fsnlAt: aborted ? null : at(fsnlS),
    syncAt: aborted ? null : at(syncS),
    trippedAt: tripS === null ? null : at(tripS),
    firingSpeedPct: firingSpeed,
    starterOffSpeedPct: starterOffPct,
    firingFuelFrac: firingFuel,
    warmupFuelFrac: warmFuel,
    lightS: light,
    unlitChamber: order ? order.chamber : null,
    track: { t0: crankAt, speedPct: speed, fuelFrac: fuel, meanC: mean },
    targetLoad: target,
    outcome: aborted ? 'aborted' : 'completed',
    loadedAt: null,
    lateLight,
  };
}

/** Steps a normal stop from breaker open to flame-out at 1 s. */
function planStop(ctx: OperationContext, unloadAt: number, breakerOpenAt: number, startMeanC: number): StopPlan {
  const s = new Stream(combineKeys(ctx.unitKey, 0x5707, breakerOpenAt / SECOND_MS));
  const flameOutPct = s.uniform(FLAME_OUT_SPEED_PCT[0], FLAME_OUT_SPEED_PCT[1]);
  const holdS = 20;
  const flameOutS = Math.ceil(holdS + COAST_SPEED_TAU_S * Math.log(100 / flameOutPct));
  const len = flameOutS + 1;
  const speed = new Float64Array(len), fuel = new Float64Array(len), mean = new Float64Array(len);
  const lag = 1 - Math.exp(-1 / START_VALUES.exhaustLagS);
  let m = startMeanC;
  for (let i = 0; i < len; i++) {
    const t = breakerOpenAt + i * SECOND_MS;
    const sp = i < holdS ? 100 : 100 * Math.exp(-(i - holdS) / COAST_SPEED_TAU_S);
    const wf = START_VALUES.fsnlFuelFrac * Math.pow(sp / 100, 1.2);
    const target = unloadedExhaustTargetC(wf, sp, ambientC(ctx.climate, t), ambientKPa(ctx.climate, t), ctx.exhaustOffsetC);
    m += (target - m) * lag;
    speed[i] = sp; fuel[i] = wf; mean[i] = m;
  }
  return { unloadAt, breakerOpenAt, flameOutAt: breakerOpenAt + flameOutS * SECOND_MS, track: { t0: breakerOpenAt, speedPct: speed, fuelFrac: fuel, meanC: mean } };
}

export interface Timeline {
  segments: Segment[];
  starts: StartPlan[];
  stops: StopPlan[];
  trips: TripEvent[];
}

/**
 * Builds the timeline of local days dFrom..dTo inclusive. baseLimit(t) is the highest load
 * fraction the ambient allows; runMeanC(load, t) the ring mean while running.
 */
export function buildTimeline(
  ctx: OperationContext,
  dFrom: number,
  dTo: number,
  baseLimit: (t: number) => number,
  runMeanC: (load: number, t: number) => number,
): Timeline {
  const segments: Segment[] = [];
  const starts: StartPlan[] = [];
  const stops: StopPlan[] = [];
  const trips: TripEvent[] = [];
  const rate = ctx.dispatch.rampPerMin ?? 0.08;
  // Which start each crossfire failure hits.
  const crossfireByCrank = new Map<number, CrossfireOrder>();
  for (const o of ctx.crossfire) {
    const at = firstStartAtOrAfter(ctx, o.at);
    if (at !== null && !crossfireByCrank.has(at)) crossfireByCrank.set(at, o);
  }
  for (let d = dFrom; d <= dTo; d++) {
    const dayStart = localDayStart(ctx.climate, d);
    const dayEnd = localDayStart(ctx.climate, d + 1);
    const plan = rawDayPlan(ctx, d);
    const events: PlanEvent[] = [...plan.events];
    for (const ft of ctx.faultTrips) if (ft.at >= dayStart && ft.at < dayEnd) events.push({ type: 'trip', at: ft.at, cause: ft.cause });
    events.sort((a, b) => a.at - b.at);
    let target = plan.initial;
    // Current state
    let run: Extract<Segment, { kind: 'run' }> | null = null;
    let busyUntil = dayStart; // a transient in progress
    let offFrom = dayStart, offFlameAt = -Infinity, offTFo = NaN, offSpeed = 0;
    const closeOff = (until: number) => {
      if (until > offFrom) segments.push({ kind: 'coast', from: offFrom, to: until, flameOffAt: offFlameAt, tFoC: offTFo, speed0: offSpeed });
    };
    if (plan.running) run = { kind: 'run', from: dayStart, to: dayEnd, kt: [dayStart], kl: [plan.initial], fastUntil: dayStart };
    const pending = [...events];
    while (pending.length) {
      pending.sort((a, b) => a.at - b.at);
      const e = pending.shift()!;
      if (e.at >= dayEnd) break;
      if (e.at < busyUntil) {
        if (e.type === 'setpoint') target = e.target;
        continue;
      }
      if (e.type === 'setpoint') {
        target = e.target;
        if (run) setRamp(run.kt, run.kl, e.at, Math.min(runSetpoint(run, e.at), baseLimit(e.at)), e.target, rate);
      } else if (e.type === 'start' && !run) {
        target = e.target;
        closeOff(e.at);
        const order = crossfireByCrank.get(e.at) ?? null;
        const sp = planStart(ctx, e.at, target, order);
        starts.push(sp);
        if (sp.outcome === 'aborted') {
          const tripAt = sp.trippedAt!;
          segments.push({ kind: 'start', from: e.at, to: tripAt, plan: sp });
          trips.push({ at: tripAt, cause: 'crossfire_failure', fromLoad: 0 });
          offFrom = tripAt; offFlameAt = tripAt; offTFo = trackValue(sp.track.meanC, sp.track.t0, tripAt); offSpeed = trackValue(sp.track.speedPct, sp.track.t0, tripAt);
          busyUntil = tripAt;
          const retry = tripAt + Math.round(new Stream(combineKeys(ctx.unitKey, 0x7e7, e.at / SECOND_MS)).uniform(35, 50)) * MINUTE_MS;
          if (retry < dayEnd - HOUR_MS) pending.push({ type: 'start', at: retry, target });
        } else {
          const syncAt = sp.syncAt!;
          segments.push({ kind: 'start', from: e.at, to: syncAt, plan: sp });
          run = { kind: 'run', from: syncAt, to: dayEnd, kt: [], kl: [], fastUntil: syncAt };
          run.kt.push(syncAt); run.kl.push(SYNC_LOAD);
          const rampEnd = setRamp(run.kt, run.kl, syncAt + SECOND_MS, SYNC_LOAD, target, rate);
          // Loaded when the actual load stops rising (setpoint reached or ambient limit met).
          let loaded = rampEnd;
          for (let t = syncAt + SECOND_MS; t < rampEnd; t += 5 * SECOND_MS) {
            if (runSetpoint(run, t) >= baseLimit(t)) { loaded = t; break; }
          }
          sp.loadedAt = loaded;
          run.fastUntil = Math.min(loaded, syncAt + 30 * MINUTE_MS);
          busyUntil = syncAt;
        }
      } else if (e.type === 'stop' && run) {
        const from = Math.min(runSetpoint(run, e.at), baseLimit(e.at));
        const open = setRamp(run.kt, run.kl, e.at, from, SYNC_LOAD, rate);
        run.to = open;
        segments.push(run);
        const sp = planStop(ctx, e.at, open, runMeanC(SYNC_LOAD, open));
        stops.push(sp);
        segments.push({ kind: 'stopping', from: open, to: sp.flameOutAt, plan: sp });
        run = null;
        offFrom = sp.flameOutAt; offFlameAt = sp.flameOutAt; offTFo = sp.track.meanC[sp.track.meanC.length - 1];
        offSpeed = sp.track.speedPct[sp.track.speedPct.length - 1];
        busyUntil = sp.flameOutAt;
      } else if (e.type === 'trip' && run) {
        const load = Math.min(runSetpoint(run, e.at), baseLimit(e.at));
        run.to = e.at;
        segments.push(run);
        run = null;
        trips.push({ at: e.at, cause: e.cause, fromLoad: load });
        const lastStart = starts[starts.length - 1];
        if (lastStart && lastStart.outcome === 'completed' && (lastStart.syncAt ?? Infinity) <= e.at) lastStart.outcome = 'tripped_from_load';
        offFrom = e.at; offFlameAt = e.at; offTFo = runMeanC(load, e.at); offSpeed = 100;
        busyUntil = e.at;
      }
    }
    if (run) { run.to = dayEnd; segments.push(run); }
    else closeOff(dayEnd);
  }
  // A start that completed on one day and tripped on a later day: mark it too.
  for (let i = 0; i < starts.length; i++) {
    const sp = starts[i];
    if (sp.outcome !== 'completed' || sp.syncAt === null) continue;
    const nextCrank = i + 1 < starts.length ? starts[i + 1].crankAt : Infinity;
    const stopAfter = stops.find((x) => x.unloadAt > sp.syncAt!)?.unloadAt ?? Infinity;
    if (trips.some((t) => t.at > sp.syncAt! && t.at < nextCrank && t.at < stopAfter)) sp.outcome = 'tripped_from_load';
  }
  return { segments, starts, stops, trips };
}

/** Index of the segment holding t (segments sorted and contiguous), or −1. */
export function findSegment(segments: Segment[], t: number): number {
  let lo = 0, hi = segments.length - 1;
  while (lo <= hi) {
    const mid = (lo + hi) >> 1;
    const s = segments[mid];
    if (t < s.from) hi = mid - 1;
    else if (t >= s.to) lo = mid + 1;
    else return mid;
  }
  return -1;
}

