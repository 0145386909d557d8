/**
 * The ring generator: from a simulated unit and a time window, the exhaust rings a plant
 * gateway would send, and the ground truth of what really happened. Per ring: the operating
 * point from the timeline (operation.ts), each chamber's heat share (fingerprint, its slow
 * wander, and faults),
 * each chamber's plume carried round by the true swirl (core swirl.ts) and spread by mixing (a
 * circular kernel), the ring mean from the exhaust model (exhaust-model.ts), then every
 * thermocouple's reading with its fixed calibration offset (a replaced probe's new one from its
 * replacement date) and noise inside IEC 60584-1 class 2, and thermocouple faults. Hot path on typed arrays; nothing allocated per reading.
 */
import { chamberAnglesDeg, thermocoupleAnglesDeg } from '../core/geometry.ts';
import { plumeAngleDeg, swirlDeg } from '../core/swirl.ts';
import { typeKToleranceC } from '../core/temperature.ts';
import { ambientC, ambientKPa, valueNoise } from './ambient.ts';
import { baseLoadFraction, combustionRiseAtExhaustC, fuelFractionAtLoad, ringMeanC } from './exhaust-model.ts';
import {
  buildTimeline, coolingExhaustC, COAST_SPEED_TAU_S, DAY_MS, findSegment, localDay, MINUTE_MS, runSetpoint,
  START_VALUES, trackValue, type CrossfireOrder, type OperationContext, type Segment, type Timeline,
} from './operation.ts';
import { clippedNormal, combineKeys, hashString, Stream } from './rng.ts';
import type {
  FaultSpec, FaultTruth, GroundTruth, RingBatch, SimRing, SimUnit, StartTruth, SwirlTruth, TimeInput, UnitPhysics,
} from './types.ts';

/** Converts a time input to ms since 1970 UTC, with a message naming the bad value. */
export function toMs(t: TimeInput, what = 'time'): number {
  const ms = t instanceof Date ? t.getTime() : typeof t === 'number' ? t : Date.parse(t);
  if (!Number.isFinite(ms)) throw new Error(`${what}: "${String(t)}" is not a time (use RFC 3339, e.g. 2026-03-01T00:00:00Z, or ms since 1970)`);
  return ms;
}

/** RFC 3339 in UTC, without milliseconds when they are zero. */
export function isoTime(ms: number): string {
  const s = new Date(ms).toISOString();
  return s.endsWith('.000Z') ? s.slice(0, -5) + 'Z' : s;
}

export interface GenerateOptions {
  from: TimeInput;
  to: TimeInput;
  /** Same seed, same rings (default 1). */
  seed?: number;
  /** Seconds between rings in steady running (default 60). */
  steadyIntervalS?: number;
  /** Seconds between rings during starts, stops, trips and loading (default 1). */
  transientIntervalS?: number;
  /** Seconds between rings while shut down; 0 = send none (default: steadyIntervalS). */
  offlineIntervalS?: number;
  /** Include flameDetected in ring objects (default true). */
  flameDetected?: boolean;
}

/** Defaults of the unit's physical truth (mixing and retention from memory, order of magnitude). */
export function resolvePhysics(unit: SimUnit): UnitPhysics {
  const p = unit.physics ?? {};
  const n = unit.config.chambers.count;
  return {
    trueSwirl: p.trueSwirl ?? { ...unit.config.swirl },
    mixingWidthFrac: p.mixingWidthFrac ?? 0.6,
    plumeRetention: p.plumeRetention ?? 0.5,
    fingerprintPct: p.fingerprintPct,
    fingerprintSigmaPct: p.fingerprintSigmaPct ?? 4,
    fingerprintWanderPct: p.fingerprintWanderPct ?? 0,
    fingerprintWanderDays: p.fingerprintWanderDays ?? 5,
    probeReplacements: p.probeReplacements ?? [],
    placementBiasFrac: p.placementBiasFrac ?? 0.012,
    exhaustOffsetC: p.exhaustOffsetC ?? 0,
    noiseSigmaC: p.noiseSigmaC ?? 0.35,
    probeOffsetMaxFrac: p.probeOffsetMaxFrac ?? 0.5,
    igniterChambers: p.igniterChambers ?? [1, Math.floor(n / 2) + 1],
    flameDetectorChambers: p.flameDetectorChambers ?? [Math.floor(n / 4) + 1, Math.floor((3 * n) / 4) + 1],
    baseFuelKgS: p.baseFuelKgS ?? unit.config.ratedPowerMw / (0.33 * 50),
  };
}

const KERNEL_RES = 10; // table steps per degree
const KERNEL_LEN = 360 * KERNEL_RES;

/**
 * Plume kernel g(Δ) sampled every 0.1°: von Mises shape exp(κ(cos Δ − 1)) with κ = 1/σ² (σ in
 * radians, σ = widthFrac · chamber pitch), scaled so its mean round the ring is 1/N (N equal
 * plumes then add up to 1 on average).
 */
export function plumeKernel(chamberCount: number, widthFrac: number): Float64Array {
  const sigma = ((widthFrac * 360) / chamberCount) * (Math.PI / 180);
  const kappa = 1 / (sigma * sigma);
  const g = new Float64Array(KERNEL_LEN);
  let sum = 0;
  for (let i = 0; i < KERNEL_LEN; i++) {
    g[i] = Math.exp(kappa * (Math.cos(((i / KERNEL_RES) * Math.PI) / 180) - 1));
    sum += g[i];
  }
  const scale = 1 / (chamberCount * (sum / KERNEL_LEN));
  for (let i = 0; i < KERNEL_LEN; i++) g[i] *= scale;
  return g;
}

interface ChamberFault { k: number; kind: 'nozzle_plugging' | 'hot_chamber' | 'flame_loss'; at: number; end: number; amount: number; rampMs: number }
interface TcFault { i: number; kind: 'tc_open' | 'tc_drift' | 'tc_erratic' | 'tc_frozen' | 'tc_replaced'; at: number; end: number; value: number; }

/** Ambient-corrected load (similarity group P/(δ·√θ) over rating), as the swirl curve expects. */
function correctedLoad(loadFraction: number, ambC: number, ambKPa: number): number {
  return loadFraction / ((ambKPa / 101.325) * Math.sqrt((ambC + 273.15) / 288.15));
}

/**
 * One unit over one window. Construct it, then take rings() (objects, one at a time),
 * batch() (columns, fast) or truth (what really happened).
 */
export class UnitSimulation {
  readonly unit: SimUnit;
  readonly physics: UnitPhysics;
  readonly fromMs: number;
  readonly toMs: number;
  readonly seed: number;
  readonly m: number;
  readonly n: number;
  private readonly unitKey: number;
  private readonly ctx: OperationContext;
  private readonly timeline: Timeline;
  private readonly steadyMs: number;
  private readonly transientMs: number;
  private readonly offlineMs: number;
  private readonly withFlame: boolean;
  private readonly tcAngle: Float64Array;
  private readonly chAngle: Float64Array;
  private readonly fingerprint: Float64Array; // fraction
  private readonly probeOffsetFrac: Float64Array;
  /** Per thermocouple: when it was replaced (Infinity = never) and the new probe's offset fraction. */
  private readonly replacedAt: Float64Array;
  private readonly replacedFrac: Float64Array;
  private readonly wanderKey: Int32Array;
  private readonly wanderMs: number;
  private readonly placementBias: Float64Array;
  private readonly kernel: Float64Array;
  private readonly chamberFaults: ChamberFault[] = [];
  private readonly tcFaults: TcFault[] = [];
  private readonly faultTruth: FaultTruth[] = [];
  private readonly noise = new Stream();
  private readonly heat: Float64Array;
  private readonly field: Float64Array;
  private readonly tcIdx: Int32Array;
  private readonly plumeIdx: Int32Array;
  // Operating point of the last evaluated ring.
  private opLoadMw = 0; private opSpeed = 0; private opFuel = 0; private opFlame = false; private opAmbC = 0; private opAmbKPa = 0;

  constructor(unit: SimUnit, opts: GenerateOptions) {
    this.unit = unit;
    const cfg = unit.config;
    this.physics = resolvePhysics(unit);
    this.fromMs = toMs(opts.from, 'from');
    this.toMs = toMs(opts.to, 'to');
    if (!(this.toMs > this.fromMs)) throw new Error(`window: "to" (${isoTime(this.toMs)}) must be after "from" (${isoTime(this.fromMs)})`);
    this.seed = opts.seed ?? 1;
    this.steadyMs = Math.round((opts.steadyIntervalS ?? 60) * 1000);
    this.transientMs = Math.round((opts.transientIntervalS ?? 1) * 1000);
    this.offlineMs = Math.round((opts.offlineIntervalS ?? opts.steadyIntervalS ?? 60) * 1000);
    if (!(this.steadyMs > 0) || !(this.transientMs > 0) || !(this.offlineMs >= 0)) throw new Error('intervals must be positive numbers of seconds');
    this.withFlame = opts.flameDetected ?? true;
    this.m = cfg.thermocouples.count;
    this.n = cfg.chambers.count;
    this.unitKey = combineKeys(hashString(cfg.id), this.seed);
    this.tcAngle = thermocoupleAnglesDeg(cfg);
    this.chAngle = chamberAnglesDeg(cfg);
    this.heat = new Float64Array(this.n);
    this.field = new Float64Array(this.m);
    this.tcIdx = new Int32Array(this.m);
    for (let i = 0; i < this.m; i++) this.tcIdx[i] = Math.round(this.tcAngle[i] * KERNEL_RES) % KERNEL_LEN;
    this.plumeIdx = new Int32Array(this.n);

    // Fixed properties of this machine, from the seed.
    const fixed = new Stream(combineKeys(this.unitKey, 0xf1));
    this.fingerprint = new Float64Array(this.n);
    for (let k = 0; k < this.n; k++) {
      const pct = this.physics.fingerprintPct?.[k] ?? clippedNormal(fixed, this.physics.fingerprintSigmaPct, 2.5);
      this.fingerprint[k] = pct / 100;
    }
    this.probeOffsetFrac = new Float64Array(this.m);
    this.placementBias = new Float64Array(this.m);
    for (let i = 0; i < this.m; i++) {
      this.probeOffsetFrac[i] = clippedNormal(fixed, this.physics.probeOffsetMaxFrac / 2, 2);
      this.placementBias[i] = clippedNormal(fixed, this.physics.placementBiasFrac, 2.5);
    }
    this.kernel = plumeKernel(this.n, this.physics.mixingWidthFrac);
    this.wanderKey = new Int32Array(this.n);
    for (let k = 0; k < this.n; k++) this.wanderKey[k] = combineKeys(this.unitKey, 0xf9a0 + k);
    this.wanderMs = this.physics.fingerprintWanderDays * DAY_MS;
    if (this.physics.fingerprintWanderPct > 0 && !(this.wanderMs > 0)) throw new Error(`fingerprintWanderDays must be a positive number of days, got ${this.physics.fingerprintWanderDays}`);
    this.replacedAt = new Float64Array(this.m).fill(Infinity);
    this.replacedFrac = new Float64Array(this.m);
    for (const r of this.physics.probeReplacements) {
      const i = this.checkTc(r.thermocouple, 'probe replacement') - 1;
      if (!(Math.abs(r.stepFrac) <= 1)) throw new Error(`probe replacement of thermocouple ${r.thermocouple}: stepFrac ${r.stepFrac} is outside ±1 (the step is at most the class-2 tolerance)`);
      if (this.replacedAt[i] !== Infinity) throw new Error(`probe replacement: thermocouple ${r.thermocouple} is replaced twice on ${cfg.id}`);
      this.replacedAt[i] = toMs(r.at, 'probe replacement at');
      const old = this.probeOffsetFrac[i];
      this.replacedFrac[i] = Math.abs(old + r.stepFrac) <= 1 ? old + r.stepFrac : old - r.stepFrac;
    }

    // Faults.
    const faults = unit.faults ?? [];
    const crossfire: CrossfireOrder[] = [];
    const faultTrips: { at: number; cause: string }[] = [];
    let earliest = this.fromMs;
    for (const f of faults) {
      const at = toMs(f.at, `${f.kind}.at`);
      if (f.kind === 'crossfire_failure') crossfire.push({ chamber: this.checkChamber(f.chamber, f.kind), lateLightS: f.lateLightS ?? null, at });
      if (f.kind === 'flame_loss' && f.tripAfterS !== undefined) faultTrips.push({ at: at + Math.round(f.tripAfterS * 1000), cause: 'flame_loss' });
      if (f.kind === 'flame_loss' || f.kind === 'tc_frozen') earliest = Math.min(earliest, at);
    }
    this.ctx = {
      unitKey: this.unitKey,
      climate: unit.climate,
      dispatch: unit.dispatch,
      chamberCount: this.n,
      igniters: this.physics.igniterChambers,
      detectors: this.physics.flameDetectorChambers,
      exhaustOffsetC: this.physics.exhaustOffsetC,
      faultTrips,
      crossfire,
    };
    const clim = unit.climate;
    const off = this.physics.exhaustOffsetC;
    this.timeline = buildTimeline(
      this.ctx,
      localDay(clim, earliest) - 1,
      localDay(clim, this.toMs),
      (t) => baseLoadFraction(ambientC(clim, t), ambientKPa(clim, t)),
      (l, t) => ringMeanC(l, ambientC(clim, t), ambientKPa(clim, t), off),
    );
    for (const f of faults) this.addFault(f);
  }

  private checkChamber(c: number, kind: string): number {
    if (!Number.isInteger(c) || c < 1 || c > this.n) throw new Error(`${kind}: chamber ${c} does not exist on ${this.unit.config.id} (chambers 1–${this.n})`);
    return c;
  }

  private checkTc(i: number, kind: string): number {
    if (!Number.isInteger(i) || i < 1 || i > this.m) throw new Error(`${kind}: thermocouple ${i} does not exist on ${this.unit.config.id} (thermocouples 1–${this.m})`);
    return i;
  }

  /** Where chamber k's (from 0) plume lands at base load, by the true and the configured swirl. */
  plumeAtBase(k: number): { true: number; configured: number } {
    const cfg = this.unit.config;
    const trueCfg = { chambers: cfg.chambers, swirl: this.physics.trueSwirl };
    return { true: plumeAngleDeg(trueCfg, k, 1), configured: plumeAngleDeg(cfg, k, 1) };
  }

  private addFault(f: FaultSpec): void {
    const id = this.unit.config.id;
    const at = toMs(f.at, `${f.kind}.at`);
    const base = { unitId: id, at: isoTime(at) };
    switch (f.kind) {
      case 'tc_open': case 'tc_drift': case 'tc_erratic': case 'tc_frozen': case 'tc_replaced': {
        const i = this.checkTc(f.thermocouple, f.kind) - 1;
        const end = f.until === undefined ? Infinity : toMs(f.until, `${f.kind}.until`);
        let value = 0;
        const params: Record<string, unknown> = {};
        if (f.kind === 'tc_open') { value = f.readsC === null ? NaN : f.readsC ?? -40; params.readsC = f.readsC === null ? null : value; }
        if (f.kind === 'tc_drift') { value = f.ratePerDayC; params.ratePerDayC = value; }
        if (f.kind === 'tc_erratic') { value = f.sigmaC; params.sigmaC = value; }
        if (f.kind === 'tc_replaced') { value = f.offsetC; params.offsetC = value; }
        if (f.kind === 'tc_frozen') { value = this.cleanReadingAt(at, i); params.frozenAtC = Math.round(value * 10) / 10; }
        this.tcFaults.push({ i, kind: f.kind, at, end, value });
        this.faultTruth.push({ ...base, kind: f.kind, thermocouple: i + 1, until: Number.isFinite(end) ? isoTime(end) : undefined, params, thermocoupleAngleDeg: this.tcAngle[i] });
        break;
      }
      case 'nozzle_plugging': {
        const k = this.checkChamber(f.chamber, f.kind) - 1;
        const end = f.cleanedAt === undefined ? Infinity : toMs(f.cleanedAt, `${f.kind}.cleanedAt`);
        if (end <= at) throw new Error(`nozzle_plugging of chamber ${f.chamber}: cleanedAt must come after at`);
        this.chamberFaults.push({ k, kind: f.kind, at, end, amount: f.depthPct / 100, rampMs: f.days * DAY_MS });
        this.faultTruth.push({ ...base, kind: f.kind, chamber: k + 1, until: Number.isFinite(end) ? isoTime(end) : undefined, params: { days: f.days, depthPct: f.depthPct, fullDepthAt: isoTime(at + f.days * DAY_MS), cleanedAt: Number.isFinite(end) ? isoTime(end) : null }, plumeAngleDegAtBase: this.plumeAtBase(k) });
        break;
      }
      case 'hot_chamber': {
        const k = this.checkChamber(f.chamber, f.kind) - 1;
        this.chamberFaults.push({ k, kind: f.kind, at, end: Infinity, amount: f.excessPct / 100, rampMs: (f.rampDays ?? 0) * DAY_MS });
        this.faultTruth.push({ ...base, kind: f.kind, chamber: k + 1, params: { excessPct: f.excessPct, rampDays: f.rampDays ?? 0 }, plumeAngleDegAtBase: this.plumeAtBase(k) });
        break;
      }
      case 'flame_loss': {
        const k = this.checkChamber(f.chamber, f.kind) - 1;
        // Lasts its duration, or until the unit leaves the grid (trip or stop), whichever first.
        let end = at + (f.durationH ?? 4) * 3_600_000;
        const si = findSegment(this.timeline.segments, at);
        const seg = si >= 0 ? this.timeline.segments[si] : null;
        if (!seg || seg.kind !== 'run') end = at; else end = Math.min(end, seg.to);
        this.chamberFaults.push({ k, kind: f.kind, at, end, amount: f.depthFrac ?? 1, rampMs: 0 });
        this.faultTruth.push({ ...base, kind: f.kind, chamber: k + 1, until: isoTime(end), params: { depthFrac: f.depthFrac ?? 1, durationH: f.durationH ?? 4, tripAfterS: f.tripAfterS ?? null, unitRunning: seg?.kind === 'run' }, plumeAngleDegAtBase: this.plumeAtBase(k) });
        break;
      }
      case 'crossfire_failure': {
        const sp = this.timeline.starts.find((s) => s.unlitChamber === f.chamber && s.crankAt >= at);
        this.faultTruth.push({ ...base, kind: f.kind, chamber: f.chamber, params: { lateLightS: f.lateLightS ?? null, startAt: sp ? isoTime(sp.crankAt) : null, outcome: sp?.outcome ?? null }, plumeAngleDegAtBase: this.plumeAtBase(f.chamber - 1) });
        break;
      }
    }
  }

  /** A thermocouple's reading at t with its offset and noise but no thermocouple fault (for a frozen value). */
  private cleanReadingAt(t: number, i: number): number {
    const si = findSegment(this.timeline.segments, t);
    if (si < 0) return NaN;
    this.evaluate(t, this.timeline.segments[si], this.field, false);
    return this.field[i];
  }

  /** Chamber k's fingerprint at t, as a fraction: the fixed value plus its slow wander. */
  private fingerprintAt(k: number, t: number): number {
    const w = this.physics.fingerprintWanderPct;
    return w > 0 ? this.fingerprint[k] + (w / 100) * valueNoise(this.wanderKey[k], t, this.wanderMs) : this.fingerprint[k];
  }

  /** Chamber k's heat-share factor from chamber faults at t. */
  private chamberFactor(k: number, t: number): number {
    let f = 1;
    const cf = this.chamberFaults;
    for (let j = 0; j < cf.length; j++) {
      const c = cf[j];
      if (c.k !== k || t < c.at || t >= c.end) continue;
      if (c.kind === 'flame_loss') { f *= 1 - c.amount; continue; }
      const ramp = c.rampMs > 0 ? Math.min(1, (t - c.at) / c.rampMs) : 1;
      f *= c.kind === 'nozzle_plugging' ? 1 - c.amount * ramp : 1 + c.amount * ramp;
    }
    return f;
  }

  /**
   * Evaluates the ring at time t in segment seg into out (°C per thermocouple, NaN = missing)
   * and sets the operating point fields. withTcFaults=false gives the healthy reading.
   */
  private evaluate(t: number, seg: Segment, out: Float64Array, withTcFaults: boolean): void {
    const clim = this.unit.climate;
    const ph = this.physics;
    const ambC = ambientC(clim, t);
    const ambK = ambientKPa(clim, t);
    const n = this.n, m = this.m;
    const heat = this.heat;
    const s = this.noise.reseed(combineKeys(this.unitKey, t));
    let load = 0, speed = 0, fuel = 0, flame = false, mean = ambC, rise = 0, swirlLoad = 0;
    let renormalise = true;
    switch (seg.kind) {
      case 'run': {
        load = Math.min(runSetpoint(seg, t), baseLoadFraction(ambC, ambK));
        speed = 100 + 0.03 * s.bounded();
        fuel = fuelFractionAtLoad(load);
        flame = true;
        mean = ringMeanC(load, ambC, ambK, ph.exhaustOffsetC);
        rise = combustionRiseAtExhaustC(load, ambC, mean);
        swirlLoad = correctedLoad(load, ambC, ambK);
        for (let k = 0; k < n; k++) heat[k] = (1 + this.fingerprintAt(k, t)) * this.chamberFactor(k, t);
        break;
      }
      case 'start': {
        const p = seg.plan;
        speed = trackValue(p.track.speedPct, p.track.t0, t);
        fuel = trackValue(p.track.fuelFrac, p.track.t0, t);
        mean = trackValue(p.track.meanC, p.track.t0, t);
        flame = t >= p.flameAt;
        rise = mean - ambC;
        renormalise = false;
        const sinceFiring = (t - p.firingAt) / 1000;
        for (let k = 0; k < n; k++) {
          const lit = sinceFiring - p.lightS[k];
          heat[k] = lit > 0 ? (1 - Math.exp(-lit / START_VALUES.chamberLightLagS)) * (1 + this.fingerprintAt(k, t)) * this.chamberFactor(k, t) : 0;
        }
        break;
      }
      case 'stopping': {
        const p = seg.plan;
        speed = trackValue(p.track.speedPct, p.track.t0, t);
        fuel = trackValue(p.track.fuelFrac, p.track.t0, t);
        mean = trackValue(p.track.meanC, p.track.t0, t);
        flame = true;
        rise = combustionRiseAtExhaustC(0, ambC, mean, speed);
        for (let k = 0; k < n; k++) heat[k] = (1 + this.fingerprintAt(k, t)) * this.chamberFactor(k, t);
        break;
      }
      case 'coast': {
        const tau = (t - seg.flameOffAt) / 1000;
        speed = seg.speed0 * Math.exp(-tau / COAST_SPEED_TAU_S);
        if (!(speed >= 0.2)) speed = 0;
        mean = coolingExhaustC(seg.tFoC, ambC, tau);
        rise = 0;
        for (let k = 0; k < n; k++) heat[k] = 1;
        break;
      }
    }
    if (renormalise) {
      let sum = 0;
      for (let k = 0; k < n; k++) sum += heat[k];
      const sc = sum > 0 ? n / sum : 0;
      for (let k = 0; k < n; k++) heat[k] *= sc;
    }
    let hbar = 0;
    for (let k = 0; k < n; k++) hbar += heat[k];
    hbar /= n;
    const sw = ph.trueSwirl;
    const psi = speed < 95 && sw.startupDeg !== undefined ? sw.startupDeg : swirlDeg(sw.curve, swirlLoad);
    const shift = sw.sense * psi;
    const beta = ph.plumeRetention;
    const g = this.kernel;
    const tol0 = ph.noiseSigmaC;
    const pk = this.plumeIdx;
    if (rise !== 0) {
      for (let k = 0; k < n; k++) {
        const a = (this.chAngle[k] + shift) * KERNEL_RES;
        pk[k] = Math.round(a - KERNEL_LEN * Math.floor(a / KERNEL_LEN));
      }
    }
    for (let i = 0; i < m; i++) {
      let acc = 0;
      if (rise !== 0) {
        const ti = this.tcIdx[i] + 2 * KERNEL_LEN;
        for (let k = 0; k < n; k++) acc += heat[k] * g[(ti - pk[k]) % KERNEL_LEN];
      }
      const gas = mean + rise * (beta * acc + (1 - beta) * hbar - 1 + this.placementBias[i]);
      const offsetFrac = t >= this.replacedAt[i] ? this.replacedFrac[i] : this.probeOffsetFrac[i];
      out[i] = gas + offsetFrac * typeKToleranceC(gas, 2) + tol0 * s.bounded();
    }
    if (withTcFaults) {
      const tf = this.tcFaults;
      for (let j = 0; j < tf.length; j++) {
        const f = tf[j];
        if (t < f.at || t >= f.end) continue;
        switch (f.kind) {
          case 'tc_open': out[f.i] = f.value; break;
          case 'tc_drift': out[f.i] += (f.value * (t - f.at)) / DAY_MS; break;
          case 'tc_erratic': out[f.i] += f.value * s.normal(); break;
          case 'tc_frozen': out[f.i] = f.value; break;
          case 'tc_replaced': out[f.i] += f.value; break;
        }
      }
    }
    this.opLoadMw = load * this.unit.config.ratedPowerMw * (load > 0 ? 1 + 0.002 * s.bounded() : 0);
    this.opSpeed = speed;
    this.opFuel = fuel * (ph.baseFuelKgS ?? 0);
    this.opFlame = flame;
    this.opAmbC = ambC;
    this.opAmbKPa = ambK;
  }

  private sampleCache: { t: Float64Array; seg: Int32Array } | null = null;

  /** Ring times of the window, in order, with their segment index (computed once). */
  private samples(): { t: Float64Array; seg: Int32Array } {
    if (this.sampleCache) return this.sampleCache;
    const segs = this.timeline.segments;
    const from = this.fromMs, to = this.toMs;
    let t = new Float64Array(1024), sg = new Int32Array(1024), c = 0;
    for (let si = 0; si < segs.length; si++) {
      const seg = segs[si];
      if (seg.to <= from || seg.from >= to) continue;
      const spans: [number, number, number][] = [];
      if (seg.kind === 'run') {
        spans.push([seg.from, Math.min(seg.fastUntil, seg.to), this.transientMs], [Math.max(seg.from, seg.fastUntil), seg.to, this.steadyMs]);
      } else if (seg.kind === 'coast') {
        const fastEnd = Number.isFinite(seg.tFoC) ? Math.min(seg.to, Math.max(seg.from, seg.flameOffAt + 10 * MINUTE_MS)) : seg.from;
        spans.push([seg.from, fastEnd, this.transientMs], [fastEnd, seg.to, this.offlineMs]);
      } else {
        spans.push([seg.from, seg.to, this.transientMs]);
      }
      for (const [a0, b0, iv] of spans) {
        if (iv <= 0) continue;
        const a = Math.max(a0, from), b = Math.min(b0, to);
        if (b <= a) continue;
        for (let x = Math.ceil(a / iv) * iv; x < b; x += iv) {
          if (c === t.length) {
            const t2 = new Float64Array(c * 2); t2.set(t); t = t2;
            const s2 = new Int32Array(c * 2); s2.set(sg); sg = s2;
          }
          t[c] = x; sg[c] = si; c++;
        }
      }
    }
    this.sampleCache = { t: t.subarray(0, c), seg: sg.subarray(0, c) };
    return this.sampleCache;
  }

  /** Number of rings in the window. */
  count(): number {
    return this.samples().t.length;
  }

  /** The rings one at a time, in the API's ring JSON shape plus unitId. */
  *rings(): Generator<SimRing> {
    const buf = new Float64Array(this.m);
    const segs = this.timeline.segments;
    const id = this.unit.config.id;
    const smp = this.samples();
    for (let j = 0; j < smp.t.length; j++) {
      const t = smp.t[j];
      this.evaluate(t, segs[smp.seg[j]], buf, true);
      const exhaustC: (number | null)[] = new Array(this.m);
      for (let i = 0; i < this.m; i++) exhaustC[i] = Number.isNaN(buf[i]) ? null : r1(buf[i]);
      const ring: SimRing = {
        unitId: id,
        ts: isoTime(t),
        loadMw: r2(this.opLoadMw),
        ambientC: r2(this.opAmbC),
        ambientKPa: r3(this.opAmbKPa),
        speedPct: r2(this.opSpeed),
        exhaustC,
        fuelFlowKgS: r3(this.opFuel),
      };
      if (this.withFlame) ring.flameDetected = this.opFlame;
      yield ring;
    }
  }

  /** All rings of the window in columns (typed arrays), rounded as in rings(). */
  batch(): RingBatch {
    const count = this.count();
    const m = this.m;
    const b: RingBatch = {
      unitId: this.unit.config.id, count, thermocoupleCount: m,
      tsMs: new Float64Array(count), loadMw: new Float64Array(count), ambientC: new Float64Array(count),
      ambientKPa: new Float64Array(count), speedPct: new Float64Array(count), fuelFlowKgS: new Float64Array(count),
      flameDetected: new Uint8Array(count), exhaustC: new Float64Array(count * m),
    };
    const buf = new Float64Array(m);
    const segs = this.timeline.segments;
    const smp = this.samples();
    for (let r = 0; r < count; r++) {
      const t = smp.t[r];
      this.evaluate(t, segs[smp.seg[r]], buf, true);
      b.tsMs[r] = t;
      b.loadMw[r] = r2(this.opLoadMw);
      b.ambientC[r] = r2(this.opAmbC);
      b.ambientKPa[r] = r3(this.opAmbKPa);
      b.speedPct[r] = r2(this.opSpeed);
      b.fuelFlowKgS[r] = r3(this.opFuel);
      b.flameDetected[r] = this.opFlame ? 1 : 0;
      const o = r * m;
      for (let i = 0; i < m; i++) b.exhaustC[o + i] = r1(buf[i]);
    }
    return b;
  }

  /** Each thermocouple's reading at t (with its calibration offset and noise) but without thermocouple faults; chamber faults included. For tests and tools. */
  healthyReadingsAt(t: TimeInput): Float64Array | null {
    const ms = toMs(t);
    const si = findSegment(this.timeline.segments, ms);
    if (si < 0) return null;
    const out = new Float64Array(this.m);
    this.evaluate(ms, this.timeline.segments[si], out, false);
    return out;
  }

  /**
   * The gas temperature at each thermocouple's position at t, before the sensor (no calibration
   * offset, no noise, no fault): what a perfect probe would read. For tests of the sensor model.
   */
  gasTemperaturesAt(t: TimeInput): Float64Array | null {
    const saveOff = this.probeOffsetFrac.slice();
    const saveNew = this.replacedFrac.slice();
    const saveNoise = this.physics.noiseSigmaC;
    this.probeOffsetFrac.fill(0);
    this.replacedFrac.fill(0);
    (this.physics as { noiseSigmaC: number }).noiseSigmaC = 0;
    try {
      return this.healthyReadingsAt(t);
    } finally {
      this.probeOffsetFrac.set(saveOff);
      this.replacedFrac.set(saveNew);
      (this.physics as { noiseSigmaC: number }).noiseSigmaC = saveNoise;
    }
  }

  /** Operating point of the unit at t (load fraction, speed, flame), for tests and tools. */
  operatingPointAt(t: TimeInput): { loadMw: number; speedPct: number; fuelFlowKgS: number; flameDetected: boolean; ambientC: number; ambientKPa: number; segment: Segment['kind'] | null } {
    const ms = toMs(t);
    const si = findSegment(this.timeline.segments, ms);
    if (si < 0) return { loadMw: 0, speedPct: 0, fuelFlowKgS: 0, flameDetected: false, ambientC: NaN, ambientKPa: NaN, segment: null };
    this.evaluate(ms, this.timeline.segments[si], this.field, false);
    return { loadMw: this.opLoadMw, speedPct: this.opSpeed, fuelFlowKgS: this.opFuel, flameDetected: this.opFlame, ambientC: this.opAmbC, ambientKPa: this.opAmbKPa, segment: this.timeline.segments[si].kind };
  }

  /** What really happened in the window: faults, starts, stops, trips, the true swirl. */
  get truth(): GroundTruth {
    const id = this.unit.config.id;
    const inWin = (t: number) => t >= this.fromMs && t < this.toMs;
    const iso = (t: number | null) => (t === null ? undefined : isoTime(t));
    const bf = this.physics.baseFuelKgS ?? 0;
    const starts: StartTruth[] = this.timeline.starts.filter((s) => inWin(s.crankAt)).map((s) => {
      const light = Array.from(s.lightS, (x) => (Number.isFinite(x) ? Math.round(x * 100) / 100 : null));
      const firstLight = Math.min(...Array.from(s.lightS));
      const lastLight = Math.max(...Array.from(s.lightS));
      return {
        id: `${id}-start-${isoTime(s.crankAt).replace(/[-:]/g, '')}`,
        unitId: id,
        crankAt: isoTime(s.crankAt), firingAt: isoTime(s.firingAt), flameAt: isoTime(s.flameAt),
        warmupAt: isoTime(s.warmupAt), accelAt: isoTime(s.accelAt),
        starterOffAt: iso(s.starterOffAt), fsnlAt: iso(s.fsnlAt), syncAt: iso(s.syncAt),
        loadingAt: s.syncAt === null ? undefined : isoTime(s.syncAt + 1000),
        loadedAt: iso(s.loadedAt), trippedAt: iso(s.trippedAt),
        outcome: s.outcome,
        firingSpeedPct: Math.round(s.firingSpeedPct * 100) / 100,
        starterOffSpeedPct: Math.round(s.starterOffSpeedPct * 100) / 100,
        firingFuelKgS: Math.round(s.firingFuelFrac * bf * 1000) / 1000,
        warmupFuelKgS: Math.round(s.warmupFuelFrac * bf * 1000) / 1000,
        chamberLightS: light,
        unlitChamber: s.unlitChamber ?? undefined,
        crossfireCompleteS: Number.isFinite(lastLight) ? Math.round((lastLight - firstLight) * 100) / 100 : null,
      };
    });
    const cfg = this.unit.config;
    const faults = this.faultTruth.slice();
    const ts = this.physics.trueSwirl;
    if (JSON.stringify(ts) !== JSON.stringify(cfg.swirl)) {
      faults.unshift({
        kind: 'wrong_swirl', unitId: id, at: isoTime(this.fromMs),
        params: { configured: cfg.swirl, true: ts },
      });
    }
    for (let i = 0; i < this.m; i++) {
      if (this.replacedAt[i] === Infinity) continue;
      faults.push({
        kind: 'probe_replaced', unitId: id, at: isoTime(this.replacedAt[i]), thermocouple: i + 1,
        params: { offsetFracBefore: Math.round(this.probeOffsetFrac[i] * 1000) / 1000, offsetFracAfter: this.replacedFrac[i] },
        thermocoupleAngleDeg: this.tcAngle[i],
      });
    }
    return {
      unitId: id, seed: this.seed, from: isoTime(this.fromMs), to: isoTime(this.toMs), config: cfg, trueSwirl: ts,
      faults,
      starts,
      trips: this.timeline.trips.filter((t) => inWin(t.at)).map((t) => ({ unitId: id, at: isoTime(t.at), cause: t.cause, fromLoadMw: Math.round(t.fromLoad * cfg.ratedPowerMw * 100) / 100 })),
      stops: this.timeline.stops.filter((s) => inWin(s.unloadAt)).map((s) => ({ unitId: id, unloadAt: isoTime(s.unloadAt), breakerOpenAt: isoTime(s.breakerOpenAt), flameOutAt: isoTime(s.flameOutAt) })),
    };
  }
}

function r1(x: number): number { return Number.isNaN(x) ? NaN : Math.round(x * 10) / 10; }
function r2(x: number): number { return Math.round(x * 100) / 100; }
function r3(x: number): number { return Math.round(x * 1000) / 1000; }

/** Simulates one unit over a window. */
export function simulateUnit(unit: SimUnit, opts: GenerateOptions): UnitSimulation {
  return new UnitSimulation(unit, opts);
}

/** Simulates several units over the same window (e.g. the demo fleet). */
export function simulateFleet(units: SimUnit[], opts: GenerateOptions): UnitSimulation[] {
  return units.map((u) => new UnitSimulation(u, opts));
}

/** Where chamber k's (from 1) plume lands by the unit's true swirl at a corrected load fraction. */
export function truePlumeAngleDeg(unit: SimUnit, chamber: number, loadFraction: number): number {
  const ph = resolvePhysics(unit);
  return plumeAngleDeg({ chambers: unit.config.chambers, swirl: ph.trueSwirl }, chamber - 1, loadFraction);
}

