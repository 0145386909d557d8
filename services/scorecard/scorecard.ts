/**
 * The detection scorecard's pure part: a fleet of simulated units with randomised geometry,
 * swirl, dispatch and one fault or none each, drawn from a seed; the ground truth of when a
 * plugging nozzle's plume becomes 10 °C deep; and the figures that compare the alerts Cansight
 * raised with that ground truth (chamber faults attributed to the right chamber, thermocouple
 * faults recognised as thermocouple faults, false alerts on healthy units by grade, plugging
 * detection delay, alarm rate per operator against the EEMUA 191 benchmark), with their table.
 * No I/O, no clock: the run through the service is in run.ts.
 */
import { defaultAnalysisOptions } from '../core/ring.ts';
import type { SiteClimate } from '../sim/ambient.ts';
import { DEMO_SITES } from '../sim/fleet.ts';
import { simulateUnit, toMs } from '../sim/generator.ts';
import { DAY_MS, HOUR_MS } from '../sim/operation.ts';
import { combineKeys, Stream } from '../sim/rng.ts';
import type { DispatchProfile, FaultSpec, FaultTruth, GroundTruth, SimUnit, TimeInput } from '../sim/types.ts';

const MINUTE_MS = 60_000;

export const CHAMBER_FAULT_KINDS = ['nozzle_plugging', 'flame_loss', 'hot_chamber'] as const;
export const TC_FAULT_KINDS = ['tc_open', 'tc_drift', 'tc_erratic', 'tc_frozen'] as const;
export type ScoredFaultKind = (typeof CHAMBER_FAULT_KINDS)[number] | (typeof TC_FAULT_KINDS)[number];

/** Alert kinds that blame a chamber. */
export const CHAMBER_ALERT_KINDS: ReadonlySet<string> = new Set(['chamber_cold', 'chamber_hot', 'chamber_drift']);

const GRADE_ORDER = ['notice', 'warning', 'alarm', 'critical'] as const;
export type ScoreGrade = (typeof GRADE_ORDER)[number];

export interface ScorecardFleetOptions {
  seed: number;
  /** Units in the fleet (at least 3). */
  units: number;
  /** Clean history before any fault, for the automatic baseline, days. */
  referenceDays: number;
  /** The scored window after the reference, days (faults begin and develop inside it). */
  days: number;
  /** End of the simulated window. */
  end: TimeInput;
  /** How the simulated machines differ from what the solver assumes (default: not at all, the ideal fleet). */
  mismatch?: Partial<FleetMismatch>;
}

/**
 * The ways a real unit differs from its model, each of which the scorecard can switch on. The
 * ideal fleet has none (the swirl curve as configured, plume widths near the solver's kernel,
 * fixed fingerprints, every probe as installed, one ring a minute, the sites' own climate).
 */
export interface FleetMismatch {
  /**
   * The true swirl differs from the configured curve: by 3–10° (either way) at mid load, and in
   * slope, a further ±5–15° per unit of load fraction about 0.6 load.
   */
  swirl: boolean;
  /** The true plume width σ is the solver's kernel width times 0.7–1.3 (±30 %). */
  plumeWidth: boolean;
  /** Each chamber's fingerprint wanders by about 1 % over days to a week (smooth noise, 1 % σ at its knots, knots 3–8 days apart). */
  fingerprintWander: boolean;
  /** One thermocouple per unit is replaced at a drawn time in the scored window: a step of 30–100 % of its class-2 tolerance. */
  probeReplacement: boolean;
  /**
   * Units send one ring a minute and one every five minutes in turn; the first unit sends one a
   * second for the last `oneHzDays` days of the window (a gateway set to its fastest rate).
   */
  ringRates: boolean;
  /** Days of 1 ring/s on the first unit when ringRates is on. */
  oneHzDays: number;
  /**
   * Seasonal ambient over the window: each site's seasonal swing is 15 °C (continental) and the
   * window sits on its falling flank, so the air is about 0.26 °C a day colder (about 10 °C over
   * 39 days) by the end than at the start, the reference window warmest.
   */
  seasonal: boolean;
}

/** The ideal fleet: the machines are their model. */
export const IDEAL_MISMATCH: FleetMismatch = { swirl: false, plumeWidth: false, fingerprintWander: false, probeReplacement: false, ringRates: false, oneHzDays: 0, seasonal: false };
/** The realistic fleet: every mismatch on. */
export const REALISTIC_MISMATCH: FleetMismatch = { swirl: true, plumeWidth: true, fingerprintWander: true, probeReplacement: true, ringRates: true, oneHzDays: 2, seasonal: true };

/** Seconds between steady rings from a time on, for one unit. */
export interface RingRate {
  fromMs: number;
  intervalS: number;
}

export interface ScorecardFleet {
  seed: number;
  fromMs: number;
  /** End of the reference window: no fault begins before it. */
  faultFromMs: number;
  toMs: number;
  units: SimUnit[];
  /** Ids of the units without a fault. */
  healthy: string[];
  /** The mismatches the fleet was drawn with. */
  mismatch: FleetMismatch;
  /** Per unit, its ring rates in time order (none: the runner's default rate throughout). */
  ringRates: Record<string, RingRate[]>;
}

/** Seconds between steady rings of a unit on the day starting at dayMs (`fallbackS` when the fleet sets none). */
export function ringIntervalS(fleet: ScorecardFleet, unitId: string, dayMs: number, fallbackS: number): number {
  let v = fallbackS;
  for (const r of fleet.ringRates[unitId] ?? []) if (r.fromMs <= dayMs) v = r.intervalS;
  return v;
}

/** Default end of the scorecard's window (a fixed past instant, so runs are comparable). */
export const DEFAULT_SCORECARD_END = '2026-11-01T00:00:00Z';

function pickOne<T>(s: Stream, xs: readonly T[]): T {
  return xs[s.int(0, xs.length - 1)];
}

function shuffle<T>(s: Stream, xs: T[]): T[] {
  for (let i = xs.length - 1; i > 0; i--) {
    const j = s.int(0, i);
    [xs[i], xs[j]] = [xs[j], xs[i]];
  }
  return xs;
}

const round1 = (x: number) => Math.round(x * 10) / 10;

/** A unit with its geometry, swirl, physics and dispatch drawn from the stream (no fault). */
function drawUnit(s: Stream, index: number, profile: DispatchProfile): SimUnit {
  const sites = Object.values(DEMO_SITES);
  const climate = sites[index % sites.length];
  const n = s.int(8, 16);
  // 1.2 to 2.9 thermocouples per chamber, never a whole multiple of the chamber count (as on the
  // demo units): a plume then meets the probes at a different offset at every chamber.
  let m = Math.round(n * s.uniform(1.2, 2.9));
  if (m % n === 0) m++;
  const pitch = 360 / n;
  const full = s.uniform(30, 80);
  const part = full + s.uniform(15, 45);
  const mid = full + (part - full) * s.uniform(0.35, 0.6);
  const id = `sc-${String(index + 1).padStart(2, '0')}`;
  return {
    config: {
      id,
      name: `Scorecard unit ${index + 1}`,
      site: climate.name,
      ratedPowerMw: round1(s.uniform(20, 250)),
      thermocouples: { count: m, firstAngleDeg: round1(s.uniform(0, 360 / m)) },
      chambers: { count: n, firstAngleDeg: round1(s.uniform(0, pitch)) },
      swirl: { sense: s.chance(0.5) ? 1 : -1, curve: [[0.2, round1(part)], [0.6, round1(mid)], [1.0, round1(full)]], startupDeg: round1(part + s.uniform(5, 15)) },
      temperatureUnit: s.chance(0.25) ? 'F' : 'C',
      view: s.chance(0.5) ? 'upstream' : 'downstream',
    },
    climate,
    physics: { mixingWidthFrac: s.uniform(0.5, 0.7), exhaustOffsetC: s.uniform(-6, 6) },
    dispatch: profile === 'peaking' ? { profile, weekendRunChance: s.uniform(0.2, 0.6) } : profile === 'cycling' ? { profile, nightLoad: s.uniform(0.55, 0.7) } : { profile },
  };
}

/**
 * A time at or after `fromMs` when the unit runs steadily at load for at least `hours` more
 * (so a flame loss happens in service), searching in quarter hours up to `toMs`; null when none.
 */
export function runningTimeAfter(unit: SimUnit, seed: number, fromMs: number, toMs: number, hours: number): number | null {
  const sim = simulateUnit({ ...unit, faults: [] }, { from: fromMs - DAY_MS, to: toMs + DAY_MS, seed });
  const step = 15 * MINUTE_MS;
  const rated = unit.config.ratedPowerMw;
  const ok = (t: number) => {
    const op = sim.operatingPointAt(t);
    return op.segment === 'run' && op.speedPct >= 99 && op.loadMw >= 0.5 * rated;
  };
  for (let t = Math.ceil(fromMs / step) * step; t + hours * HOUR_MS < toMs; t += step) {
    let good = true;
    for (let u = t; u <= t + hours * HOUR_MS && good; u += step) good = ok(u);
    if (good) return t;
  }
  return null;
}

/** One fault of `kind` for the unit, placed in the scored window. */
function drawFault(s: Stream, unit: SimUnit, kind: ScoredFaultKind, seed: number, faultFromMs: number, toMs: number): FaultSpec {
  const n = unit.config.chambers.count;
  const m = unit.config.thermocouples.count;
  const span = toMs - faultFromMs;
  const iso = (t: number) => new Date(Math.round(t / MINUTE_MS) * MINUTE_MS).toISOString();
  const early = () => faultFromMs + DAY_MS + s.uniform(0, 0.25) * span;
  switch (kind) {
    case 'nozzle_plugging':
      // Full depth well before the end, so the plume grows through the window.
      return { kind, chamber: s.int(1, n), at: iso(early()), days: round1(Math.max(2, s.uniform(0.3, 0.5) * (span / DAY_MS))), depthPct: round1(s.uniform(12, 20)) };
    case 'hot_chamber':
      return { kind, chamber: s.int(1, n), at: iso(early()), excessPct: round1(s.uniform(10, 18)), rampDays: round1(s.uniform(0, 3)) };
    case 'flame_loss': {
      const durationH = round1(s.uniform(2, 6));
      const want = faultFromMs + DAY_MS + s.uniform(0, 0.5) * span;
      const at = runningTimeAfter(unit, seed, want, toMs - DAY_MS, durationH) ?? runningTimeAfter(unit, seed, faultFromMs + DAY_MS, toMs - DAY_MS, durationH) ?? want;
      return { kind, chamber: s.int(1, n), at: iso(at), durationH };
    }
    case 'tc_open':
      return { kind, thermocouple: s.int(1, m), at: iso(early()), readsC: s.chance(0.5) ? null : -40 };
    case 'tc_drift': {
      // A rate that takes the reading 25–45 °C away by the end of the window, however long it is.
      const at = early();
      const rate = s.uniform(25, 45) / Math.max(1, (toMs - at) / DAY_MS);
      return { kind, thermocouple: s.int(1, m), at: iso(at), ratePerDayC: Math.round((s.chance(0.5) ? -1 : 1) * rate * 100) / 100 };
    }
    case 'tc_erratic':
      return { kind, thermocouple: s.int(1, m), at: iso(early()), sigmaC: round1(s.uniform(8, 15)) };
    case 'tc_frozen':
      return { kind, thermocouple: s.int(1, m), at: iso(early()) };
  }
}

/**
 * The scorecard fleet: `units` units with chamber counts 8–16, 1.2 to 2.9 thermocouples per
 * chamber (never a whole multiple), both swirl senses, swirl curves of 30–80° at full load and 15–45° more at part load,
 * base, cycling and peaking dispatch in turn, at the demo's three sites; about a third healthy,
 * the others one fault each, the kinds dealt in turn from a shuffled deck so every chamber and
 * thermocouple fault kind appears. No fault begins in the first `referenceDays`.
 */
export function scorecardFleet(o: ScorecardFleetOptions): ScorecardFleet {
  if (!(o.units >= 3)) throw new Error(`a scorecard fleet needs at least 3 units, got ${o.units}`);
  if (!(o.days >= 3)) throw new Error(`the scored window must be at least 3 days, got ${o.days}`);
  const toMsV = toMs(o.end, 'end');
  const faultFromMs = toMsV - Math.round(o.days * DAY_MS);
  const fromMs = faultFromMs - Math.round(o.referenceDays * DAY_MS);
  const s = new Stream(combineKeys(0x5c0c4d, o.seed));
  const profiles: DispatchProfile[] = ['base', 'cycling', 'peaking'];
  const units: SimUnit[] = [];
  for (let i = 0; i < o.units; i++) units.push(drawUnit(s, i, profiles[i % 3]));
  const healthyCount = Math.round(o.units / 3);
  const order = shuffle(s, units.map((_, i) => i));
  const healthy = new Set(order.slice(0, healthyCount));
  const deck = shuffle(s, [...CHAMBER_FAULT_KINDS, ...TC_FAULT_KINDS] as ScoredFaultKind[]);
  let next = 0;
  for (const i of order) {
    if (healthy.has(i)) continue;
    const kind = deck[next++ % deck.length];
    units[i].faults = [drawFault(s, units[i], kind, o.seed, faultFromMs, toMsV)];
  }
  const mismatch: FleetMismatch = { ...IDEAL_MISMATCH, ...o.mismatch };
  const ringRates = applyMismatch(units, mismatch, o.seed, fromMs, faultFromMs, toMsV);
  return { seed: o.seed, fromMs, faultFromMs, toMs: toMsV, units, healthy: units.filter((_, i) => healthy.has(i)).map((u) => u.config.id), mismatch, ringRates };
}

const YEAR_DAYS = 365.2425;

/**
 * Makes the drawn units differ from their model as `mismatch` says (in place), from a stream of
 * its own so the units' geometry, dispatch and faults are those of the ideal fleet of the same
 * seed. Returns the ring rates.
 */
function applyMismatch(units: SimUnit[], mismatch: FleetMismatch, seed: number, fromMs: number, faultFromMs: number, toMs: number): Record<string, RingRate[]> {
  const s = new Stream(combineKeys(0x6d15, seed));
  const sign = () => (s.chance(0.5) ? 1 : -1);
  const rates: Record<string, RingRate[]> = {};
  const midDay = ((fromMs + toMs) / 2 / DAY_MS) % YEAR_DAYS;
  units.forEach((u, index) => {
    const ph = (u.physics ??= {});
    // Every draw is made whatever is switched on, so one mismatch on or off leaves the others as they were.
    const offset = sign() * s.uniform(3, 10), slope = sign() * s.uniform(5, 15);
    const widthFactor = s.uniform(0.7, 1.3);
    const wanderDays = s.uniform(3, 8);
    const tc = s.int(1, u.config.thermocouples.count);
    const replacedAt = faultFromMs + s.uniform(0.1, 0.9) * (toMs - faultFromMs);
    const step = sign() * s.uniform(0.3, 1);
    if (mismatch.swirl) {
      const c = u.config.swirl;
      ph.trueSwirl = { ...c, curve: c.curve.map(([l, d]) => [l, round1(d + offset + slope * (l - 0.6))]), startupDeg: c.startupDeg === undefined ? undefined : round1(c.startupDeg + offset) };
    }
    if (mismatch.plumeWidth) ph.mixingWidthFrac = defaultAnalysisOptions.plumeWidthFraction * widthFactor;
    if (mismatch.fingerprintWander) {
      ph.fingerprintWanderPct = 1;
      ph.fingerprintWanderDays = round1(wanderDays);
    }
    if (mismatch.probeReplacement) ph.probeReplacements = [{ thermocouple: tc, at: new Date(Math.round(replacedAt / MINUTE_MS) * MINUTE_MS).toISOString(), stepFrac: Math.round(step * 100) / 100 }];
    if (mismatch.seasonal) u.climate = seasonalClimate(u.climate, midDay);
    if (mismatch.ringRates) {
      rates[u.config.id] = [{ fromMs, intervalS: index % 2 === 0 ? 60 : 300 }];
      if (index === 0 && mismatch.oneHzDays > 0) rates[u.config.id].push({ fromMs: toMs - Math.round(mismatch.oneHzDays) * DAY_MS, intervalS: 1 });
    }
  });
  return rates;
}

/** A site's climate with a 15 °C seasonal swing whose falling flank is at day of year `midDay`. */
function seasonalClimate(c: SiteClimate, midDay: number): SiteClimate {
  return { ...c, seasonalAmpC: 15, warmestDayOfYear: Math.round((midDay - YEAR_DAYS / 4 + YEAR_DAYS) % YEAR_DAYS) };
}

/** The ground truth of every unit of the fleet over its window. */
export function fleetTruth(fleet: ScorecardFleet): GroundTruth[] {
  return fleet.units.map((u) => simulateUnit(u, { from: fleet.fromMs, to: fleet.toMs, seed: fleet.seed }).truth);
}

/**
 * When a plugging nozzle's cold plume first reaches `levelDegC` on the exhaust ring (ground
 * truth, not an estimate): at each quarter hour of steady running after the fault begins, the
 * noise-free gas temperature at every thermocouple position is compared with the same unit
 * without the fault; the plume depth is the largest drop less the drop of the ring mean (the
 * part of the lost heat that mixes round the whole ring). Null if it never gets that deep.
 */
export function pluggingDepthReachedMs(unit: SimUnit, fault: FaultTruth, seed: number, untilMs: number, levelDegC = 10): number | null {
  const at = toMs(fault.at);
  const faulty = simulateUnit(unit, { from: at - DAY_MS, to: untilMs + DAY_MS, seed });
  const clean = simulateUnit({ ...unit, faults: [] }, { from: at - DAY_MS, to: untilMs + DAY_MS, seed });
  const step = 15 * MINUTE_MS;
  for (let t = Math.ceil(at / step) * step; t < untilMs; t += step) {
    const op = faulty.operatingPointAt(t);
    if (op.segment !== 'run' || op.speedPct < 99) continue;
    const a = faulty.gasTemperaturesAt(t);
    const b = clean.gasTemperaturesAt(t);
    if (!a || !b) continue;
    let max = -Infinity;
    let sum = 0;
    for (let i = 0; i < a.length; i++) {
      const d = b[i] - a[i];
      sum += d;
      if (d > max) max = d;
    }
    if (max - sum / a.length >= levelDegC) return t;
  }
  return null;
}

/** An alert as the scorecard reads it (the API's alert shape, the fields it needs). */
export interface ScoredAlert {
  unitId: string;
  kind: string;
  grade: string;
  chamber: number | null;
  thermocouple: number | null;
  runnerUpChamber: number | null;
  raisedAt: string;
  history?: { action: string; grade: string; at: string }[];
  evidence?: Record<string, unknown>;
}

/** Highest grade an alert reached in its life. */
export function highestGrade(a: ScoredAlert): ScoreGrade {
  let r = GRADE_ORDER.indexOf(a.grade as ScoreGrade);
  for (const h of a.history ?? []) r = Math.max(r, GRADE_ORDER.indexOf(h.grade as ScoreGrade));
  return GRADE_ORDER[Math.max(0, r)];
}

/** When an alert was announced to people (raised, and again each time it became active again), ms. */
export function annunciationsMs(a: ScoredAlert): number[] {
  const h = (a.history ?? []).filter((x) => x.action === 'raised' || x.action === 'reactivated').map((x) => Date.parse(x.at));
  return h.length ? h : [Date.parse(a.raisedAt)];
}

export interface ChamberFaultResult {
  unitId: string;
  kind: string;
  chamber: number;
  at: string;
  /** The first chamber alert after the fault began: its kind, chamber and runner-up. */
  firstAlert: { kind: string; grade: ScoreGrade; chamber: number | null; runnerUpChamber: number | null; raisedAt: string } | null;
  top1: boolean;
  top2: boolean;
  /** Plugging: when the plume reached 10 °C deep, and hours from then to the first alert naming the chamber. */
  depth10At?: string | null;
  delayH?: number | null;
}

export interface TcFaultResult {
  unitId: string;
  kind: string;
  thermocouple: number;
  at: string;
  /** A thermocouple_fault alert named this thermocouple after the fault began. */
  namedThermocouple: boolean;
  /** Chamber alerts raised on the unit after the fault began (a thermocouple taken for a chamber). */
  chamberAlerts: number;
  /** Found as a thermocouple fault and not blamed on a chamber. */
  correct: boolean;
  firstTcAlertAt: string | null;
}

export interface FalseAlert {
  unitId: string;
  kind: string;
  grade: ScoreGrade;
  chamber: number | null;
  thermocouple: number | null;
  raisedAt: string;
  /** The evidence's reason, when it gives one (e.g. which validity test). */
  reason: string | null;
}

export interface AlarmRate {
  /** Who one operator watches ('fleet' or a site name). */
  operator: string;
  annunciations: number;
  /** Average per 10 minutes over the window. */
  per10Min: number;
  /** Most in any 10-minute span. */
  peak10Min: number;
}

export interface ScorecardFigures {
  units: number;
  healthyUnits: number;
  referenceDays: number;
  days: number;
  chamber: ChamberFaultResult[];
  thermocouple: TcFaultResult[];
  /** Alerts on healthy units over the whole window, each with its highest grade. */
  falseAlerts: FalseAlert[];
  /** Alerts on faulty units raised before their fault began. */
  preFaultAlerts: FalseAlert[];
  /** Healthy unit-months of the whole window (reference and scored). */
  healthyUnitMonths: number;
  alarmRates: AlarmRate[];
}

/** Hours between two times. */
const hoursBetween = (a: number, b: number) => (b - a) / HOUR_MS;

function first<T extends ScoredAlert>(xs: T[]): T | null {
  let best: T | null = null;
  for (const x of xs) if (!best || Date.parse(x.raisedAt) < Date.parse(best.raisedAt)) best = x;
  return best;
}

/**
 * Scores alerts against ground truth. `depth10At` gives, for a plugging fault's unit, when its
 * plume reached 10 °C (pluggingDepthReachedMs), computed by the caller once.
 */
export function scoreAlerts(
  fleet: ScorecardFleet,
  truths: readonly GroundTruth[],
  alerts: readonly ScoredAlert[],
  depth10At: ReadonlyMap<string, number | null> = new Map(),
  referenceDays = (fleet.faultFromMs - fleet.fromMs) / DAY_MS,
): ScorecardFigures {
  const byUnit = new Map<string, ScoredAlert[]>();
  for (const a of alerts) {
    const l = byUnit.get(a.unitId) ?? [];
    l.push(a);
    byUnit.set(a.unitId, l);
  }
  const chamber: ChamberFaultResult[] = [];
  const thermocouple: TcFaultResult[] = [];
  const falseAlerts: FalseAlert[] = [];
  const preFaultAlerts: FalseAlert[] = [];
  const asFalse = (a: ScoredAlert): FalseAlert => ({ unitId: a.unitId, kind: a.kind, grade: highestGrade(a), chamber: a.chamber, thermocouple: a.thermocouple, raisedAt: a.raisedAt, reason: typeof a.evidence?.reason === 'string' ? a.evidence.reason : null });
  const healthy = new Set(fleet.healthy);
  for (const truth of truths) {
    const mine = byUnit.get(truth.unitId) ?? [];
    if (healthy.has(truth.unitId)) {
      for (const a of mine) falseAlerts.push(asFalse(a));
      continue;
    }
    const faults = truth.faults.filter((f) => (CHAMBER_FAULT_KINDS as readonly string[]).includes(f.kind) || (TC_FAULT_KINDS as readonly string[]).includes(f.kind));
    if (faults.length === 0) continue;
    const onset = Math.min(...faults.map((f) => Date.parse(f.at)));
    for (const a of mine) if (Date.parse(a.raisedAt) < onset) preFaultAlerts.push(asFalse(a));
    for (const f of faults) {
      const at = Date.parse(f.at);
      const after = mine.filter((a) => Date.parse(a.raisedAt) >= at);
      if ((CHAMBER_FAULT_KINDS as readonly string[]).includes(f.kind)) {
        const ch = f.chamber as number;
        const firstAlert = first(after.filter((a) => CHAMBER_ALERT_KINDS.has(a.kind)));
        const r: ChamberFaultResult = {
          unitId: truth.unitId,
          kind: f.kind,
          chamber: ch,
          at: f.at,
          firstAlert: firstAlert
            ? { kind: firstAlert.kind, grade: highestGrade(firstAlert), chamber: firstAlert.chamber, runnerUpChamber: firstAlert.runnerUpChamber, raisedAt: firstAlert.raisedAt }
            : null,
          top1: firstAlert !== null && firstAlert.chamber === ch,
          top2: firstAlert !== null && (firstAlert.chamber === ch || firstAlert.runnerUpChamber === ch),
        };
        if (f.kind === 'nozzle_plugging') {
          const d10 = depth10At.get(truth.unitId) ?? null;
          r.depth10At = d10 === null ? null : new Date(d10).toISOString();
          const named = first(after.filter((a) => CHAMBER_ALERT_KINDS.has(a.kind) && a.chamber === ch));
          r.delayH = d10 !== null && named ? Math.round(hoursBetween(d10, Date.parse(named.raisedAt)) * 10) / 10 : null;
        }
        chamber.push(r);
      } else {
        const tc = f.thermocouple as number;
        const tcAlerts = after.filter((a) => a.kind === 'thermocouple_fault' && a.thermocouple === tc);
        const chamberAlerts = after.filter((a) => CHAMBER_ALERT_KINDS.has(a.kind)).length;
        const firstTc = first(tcAlerts);
        thermocouple.push({
          unitId: truth.unitId,
          kind: f.kind,
          thermocouple: tc,
          at: f.at,
          namedThermocouple: tcAlerts.length > 0,
          chamberAlerts,
          correct: tcAlerts.length > 0 && chamberAlerts === 0,
          firstTcAlertAt: firstTc ? firstTc.raisedAt : null,
        });
      }
    }
  }
  const windowMs = fleet.toMs - fleet.fromMs;
  const healthyUnitMonths = (fleet.healthy.length * windowMs) / (30 * DAY_MS);
  // Alarm rate: one operator per site, and one for the whole fleet (a monitoring centre).
  const siteOf = new Map(fleet.units.map((u) => [u.config.id, u.config.site]));
  const groups = new Map<string, number[]>([['fleet', []]]);
  for (const a of alerts) {
    const site = siteOf.get(a.unitId) ?? 'unknown';
    for (const t of annunciationsMs(a)) {
      groups.get('fleet')!.push(t);
      if (!groups.has(site)) groups.set(site, []);
      groups.get(site)!.push(t);
    }
  }
  for (const u of fleet.units) if (!groups.has(u.config.site)) groups.set(u.config.site, []);
  const alarmRates: AlarmRate[] = [...groups].map(([operator, times]) => ({
    operator,
    annunciations: times.length,
    per10Min: times.length / (windowMs / (10 * MINUTE_MS)),
    peak10Min: peakInSpan(times, 10 * MINUTE_MS),
  }));
  return {
    units: fleet.units.length,
    healthyUnits: fleet.healthy.length,
    referenceDays,
    days: (fleet.toMs - fleet.faultFromMs) / DAY_MS,
    chamber,
    thermocouple,
    falseAlerts,
    preFaultAlerts,
    healthyUnitMonths,
    alarmRates,
  };
}

/** Most of `times` inside any half-open span of `spanMs`. */
export function peakInSpan(times: number[], spanMs: number): number {
  const t = times.slice().sort((a, b) => a - b);
  let best = 0;
  for (let i = 0, j = 0; j < t.length; j++) {
    while (t[j] - t[i] >= spanMs) i++;
    best = Math.max(best, j - i + 1);
  }
  return best;
}

const pct = (num: number, den: number) => (den > 0 ? Math.round((1000 * num) / den) / 10 : null);

function median(xs: number[]): number | null {
  if (!xs.length) return null;
  const s = xs.slice().sort((a, b) => a - b);
  const h = s.length >> 1;
  return s.length % 2 ? s[h] : (s[h - 1] + s[h]) / 2;
}

/** The floors the detection is held to: attribution shares in %, alarm rates per operator. */
export const SCORECARD_FLOORS = {
  chamberTop1Pct: 95,
  tcAsTcPct: 95,
  /** Alarm- or critical-grade alerts on healthy units. */
  falseAlarmGrade: 0,
  /** EEMUA 191: about one alarm per 10 minutes per operator is manageable… */
  per10Min: 1,
  /** …and more than 10 in 10 minutes is a flood. */
  peak10Min: 10,
} as const;

/**
 * The floors of the realistic fleet (true swirl, plume width, fingerprints, probes, ring rates
 * and climate all differing from the model): a little lower on the first-named chamber, with
 * the runner-up held high.
 */
export const REALISTIC_FLOORS = {
  chamberTop1Pct: 90,
  chamberTop2Pct: 98,
  tcAsTcPct: 95,
  falseAlarmGrade: 0,
  per10Min: 1,
  peak10Min: 10,
} as const;

export type ScorecardFloors = { chamberTop1Pct: number; chamberTop2Pct?: number; tcAsTcPct: number; falseAlarmGrade: number; per10Min: number; peak10Min: number };

/** Which floors a run meets (top-2 only when the floors set one). */
export function floorsMet(f: ScorecardFigures, floors: ScorecardFloors = SCORECARD_FLOORS) {
  const h = headline(f);
  const top2 = floors.chamberTop2Pct;
  return {
    chamberTop1: h.chamberTop1Pct !== null && h.chamberTop1Pct >= floors.chamberTop1Pct,
    ...(top2 === undefined ? {} : { chamberTop2: h.chamberTop2Pct !== null && h.chamberTop2Pct >= top2 }),
    tcAsTc: h.tcAsTcPct !== null && h.tcAsTcPct >= floors.tcAsTcPct,
    noAlarmOnHealthy: h.falseAlarmGrade <= floors.falseAlarmGrade,
    eemuaAverage: f.alarmRates.every((r) => r.per10Min <= floors.per10Min),
    eemuaFlood: f.alarmRates.every((r) => r.peak10Min <= floors.peak10Min),
  };
}

/** The headline figures (what the floors are judged on and the JSON line carries). */
export function headline(f: ScorecardFigures) {
  const top1 = f.chamber.filter((c) => c.top1).length;
  const top2 = f.chamber.filter((c) => c.top2).length;
  const tcOk = f.thermocouple.filter((t) => t.correct).length;
  const byGrade: Record<ScoreGrade, number> = { notice: 0, warning: 0, alarm: 0, critical: 0 };
  for (const a of f.falseAlerts) byGrade[a.grade]++;
  const perUnitMonth: Record<ScoreGrade, number> = { notice: 0, warning: 0, alarm: 0, critical: 0 };
  for (const g of GRADE_ORDER) perUnitMonth[g] = f.healthyUnitMonths > 0 ? Math.round((100 * byGrade[g]) / f.healthyUnitMonths) / 100 : 0;
  const delays = f.chamber.filter((c) => c.kind === 'nozzle_plugging' && typeof c.delayH === 'number').map((c) => c.delayH as number);
  const plugging = f.chamber.filter((c) => c.kind === 'nozzle_plugging').length;
  const sites = f.alarmRates.filter((r) => r.operator !== 'fleet');
  const fleet = f.alarmRates.find((r) => r.operator === 'fleet');
  const worstSite = sites.reduce((a, b) => (b.per10Min > a.per10Min ? b : a), sites[0] ?? { operator: '-', annunciations: 0, per10Min: 0, peak10Min: 0 });
  const peakSite = Math.max(0, ...sites.map((r) => r.peak10Min));
  return {
    units: f.units,
    healthyUnits: f.healthyUnits,
    referenceDays: f.referenceDays,
    days: f.days,
    chamberFaults: f.chamber.length,
    chamberFound: f.chamber.filter((c) => c.firstAlert !== null).length,
    chamberTop1Pct: pct(top1, f.chamber.length),
    chamberTop2Pct: pct(top2, f.chamber.length),
    tcFaults: f.thermocouple.length,
    tcNamed: f.thermocouple.filter((t) => t.namedThermocouple).length,
    tcBlamedOnChamber: f.thermocouple.filter((t) => t.chamberAlerts > 0).length,
    tcAsTcPct: pct(tcOk, f.thermocouple.length),
    falseAlerts: byGrade,
    falsePerHealthyUnitMonth: perUnitMonth,
    falseAlarmGrade: byGrade.alarm + byGrade.critical,
    preFaultAlerts: f.preFaultAlerts.length,
    pluggingFaults: plugging,
    pluggingDetected: delays.length,
    pluggingDelayMedianH: delays.length ? Math.round((median(delays) as number) * 10) / 10 : null,
    pluggingDelayMaxH: delays.length ? Math.max(...delays) : null,
    alarmsPer10MinWorstSite: Math.round(worstSite.per10Min * 10000) / 10000,
    alarmsPer10MinFleet: fleet ? Math.round(fleet.per10Min * 10000) / 10000 : 0,
    peak10MinWorstSite: peakSite,
    peak10MinFleet: fleet ? fleet.peak10Min : 0,
    /** EEMUA 191: about one alarm per 10 minutes per operator is manageable; over 10 in 10 minutes is a flood. */
    eemuaManageable: worstSite.per10Min <= 1 && peakSite <= 10 && (fleet ? fleet.per10Min <= 1 : true),
  };
}

const pad = (s: string, n: number) => (s.length >= n ? s : s + ' '.repeat(n - s.length));
const fmt = (v: number | null | undefined, unit = '') => (v === null || v === undefined ? '—' : `${v}${unit}`);

/** The scorecard as a table for people (plain text, one line per row). */
export function formatScorecard(f: ScorecardFigures): string {
  const h = headline(f);
  const lines: string[] = [];
  lines.push(`Detection scorecard: ${f.units} units (${f.healthyUnits} healthy), ${f.referenceDays} days of reference then ${f.days} days scored`);
  lines.push('');
  lines.push(pad('chamber fault', 34) + pad('unit', 8) + pad('true', 6) + pad('first alert', 34) + pad('top-1', 7) + pad('top-2', 7) + 'plugging delay after 10 °C');
  for (const c of f.chamber) {
    const a = c.firstAlert;
    const said = a ? `${a.kind} ch ${a.chamber ?? '—'} (2nd ${a.runnerUpChamber ?? '—'}) ${a.grade}` : 'none';
    lines.push(pad(`${c.kind} from ${c.at.slice(0, 16)}`, 34) + pad(c.unitId, 8) + pad(String(c.chamber), 6) + pad(said, 34) + pad(c.top1 ? 'yes' : 'no', 7) + pad(c.top2 ? 'yes' : 'no', 7) + (c.kind === 'nozzle_plugging' ? fmt(c.delayH, ' h') : ''));
  }
  lines.push('');
  lines.push(pad('thermocouple fault', 34) + pad('unit', 8) + pad('tc', 6) + pad('named as thermocouple', 24) + pad('chamber alerts', 16) + 'correct');
  for (const t of f.thermocouple) {
    lines.push(pad(`${t.kind} from ${t.at.slice(0, 16)}`, 34) + pad(t.unitId, 8) + pad(String(t.thermocouple), 6) + pad(t.namedThermocouple ? `yes, ${t.firstTcAlertAt?.slice(0, 16)}` : 'no', 24) + pad(String(t.chamberAlerts), 16) + (t.correct ? 'yes' : 'no'));
  }
  lines.push('');
  lines.push(`false alerts on healthy units (${Math.round(f.healthyUnitMonths * 100) / 100} unit-months):`);
  for (const g of GRADE_ORDER) lines.push(`  ${pad(g, 9)} ${pad(String(h.falseAlerts[g]), 5)} ${h.falsePerHealthyUnitMonth[g]} per unit-month`);
  for (const a of f.falseAlerts) lines.push(`    ${a.unitId} ${a.kind} ${a.grade} ch ${a.chamber ?? '—'} tc ${a.thermocouple ?? '—'} at ${a.raisedAt.slice(0, 16)}${a.reason ? ` (${a.reason})` : ''}`);
  lines.push(`alerts on faulty units before their fault began: ${f.preFaultAlerts.length}`);
  for (const a of f.preFaultAlerts) lines.push(`    ${a.unitId} ${a.kind} ${a.grade} ch ${a.chamber ?? '—'} tc ${a.thermocouple ?? '—'} at ${a.raisedAt.slice(0, 16)}${a.reason ? ` (${a.reason})` : ''}`);
  lines.push('');
  lines.push('alarm rate (one operator per site, and one for the whole fleet; every alert raised or reactivated counts):');
  for (const r of f.alarmRates) lines.push(`  ${pad(r.operator, 16)} ${pad(String(r.annunciations), 6)} alerts, ${Math.round(r.per10Min * 10000) / 10000} per 10 min on average, at most ${r.peak10Min} in any 10 min`);
  lines.push(`  EEMUA 191: about 1 per 10 min per operator is manageable, over 10 in 10 min is a flood: ${h.eemuaManageable ? 'inside' : 'OUTSIDE'}`);
  lines.push('');
  lines.push(pad('figure', 52) + 'value');
  for (const [label, value] of figureRows(f)) lines.push(pad(label, 52) + value);
  return lines.join('\n');
}

/** The headline figures as (label, value) rows, as the tables print them. */
function figureRows(f: ScorecardFigures): [string, string][] {
  const h = headline(f);
  return [
    ['chamber faults found with the right chamber, top-1', `${fmt(h.chamberTop1Pct, ' %')} (${f.chamber.filter((c) => c.top1).length}/${h.chamberFaults})`],
    ['… top-2 (named or runner-up)', `${fmt(h.chamberTop2Pct, ' %')} (${f.chamber.filter((c) => c.top2).length}/${h.chamberFaults})`],
    ['thermocouple faults found as thermocouple faults', `${fmt(h.tcAsTcPct, ' %')} (${f.thermocouple.filter((t) => t.correct).length}/${h.tcFaults})`],
    ['false alerts per healthy unit-month, notice/warning', `${h.falsePerHealthyUnitMonth.notice} / ${h.falsePerHealthyUnitMonth.warning}`],
    ['false alerts per healthy unit-month, alarm/critical', `${h.falsePerHealthyUnitMonth.alarm} / ${h.falsePerHealthyUnitMonth.critical}`],
    ['plugging detected after 10 °C deep, median / max', `${fmt(h.pluggingDelayMedianH, ' h')} / ${fmt(h.pluggingDelayMaxH, ' h')} (${h.pluggingDetected}/${h.pluggingFaults} detected)`],
    ['alarm rate, worst site / fleet, per 10 min', `${h.alarmsPer10MinWorstSite} / ${h.alarmsPer10MinFleet}`],
  ];
}

/** The headline figures of several runs side by side, one column per run (e.g. the ideal and the realistic fleet). */
export function formatSideBySide(runs: { name: string; figures: ScorecardFigures }[]): string {
  const cols = runs.map((r) => figureRows(r.figures));
  const width = Math.max(24, ...cols.flat().map(([, v]) => v.length + 2));
  const lines = [pad('figure', 52) + runs.map((r) => pad(`${r.name} (${r.figures.units} units)`, width)).join('')];
  cols[0].forEach(([label], i) => lines.push(pad(label, 52) + cols.map((c) => pad(c[i][1], width)).join('')));
  return lines.join('\n');
}
