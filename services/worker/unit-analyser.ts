/**
 * One unit's ring-by-ring analysis with the memory it needs between rings: the recent loads
 * for the steady-state test, the recent readings for the window tests (frozen, erratic,
 * drifting alone), the recent validity codes (recurring outliers and gaps) and the spread of
 * the previous steady ring. That memory is a function of the ring history only, so `prime`
 * rebuilds it from stored rings and analysis after a restart or a takeover and the next ring
 * is analysed exactly as it would have been without the interruption. No I/O here.
 */
import { analyseRing, baselineResidualsInto, createResidualBuffers, plumeResponseAt, prepareUnit, type BaselineResiduals, type ResidualBuffers, type UnitContext } from '../core/ring.ts';
import { chamberScatterInto, worstChamberVerdict, type ChamberFindingRef, type WorstChamberVerdict } from '../core/worst-chamber.ts';
import type { UnitBaseline } from '../core/baseline.ts';
import { correctedLoadFraction, defaultSteadyStateOptions, type SteadyStateOptions } from '../core/correction.ts';
import { evaluateFindings } from '../core/evaluate-findings.ts';
import { gradeRank, spreadLimitDegC, type ChamberDriftInput, type Finding, type Thresholds } from '../core/findings.ts';
import { VALIDITY } from '../core/types.ts';
import { windowValidity, type WindowVerdict } from '../core/validity.ts';
import type { WorkerConfig } from '../db/config.ts';
import type { AnalysisColumns } from '../db/analysis.ts';
import type { AnalysisRow } from '../db/analysis-write.ts';
import type { RingColumns } from '../db/analysis-rings.ts';
import type { ConfigVersionRecord } from '../db/units.ts';
import { ReadingsWindow, RecentCodes, SteadyWindow } from './windows.ts';
import type { ProbeReplacement } from '../db/events.ts';
import { ProbeOffsets, type LearntOffset } from './probe-offsets.ts';
import { baselineForMode, ModeTracker, type ModalBaseline } from '../core/modes.ts';
import { baselinePeriodAt, baselineStanding, chambersReached, NEW_PERIOD_KINDS, type BaselinePeriod, type PeriodEvent } from '../core/baseline-periods.ts';

export interface AnalyserInputs {
  unitId: string;
  versions: ConfigVersionRecord[];
  baseline: UnitBaseline | null;
  /** Latest drift state per chamber (index 0 = chamber 1). */
  driftChambers: (ChamberDriftInput | null)[];
  /** Latest drift state per thermocouple (index 0 = thermocouple 1). */
  driftThermocouples: (ChamberDriftInput | null)[];
  raise: Thresholds;
  hold: Thresholds;
  settings: WorkerConfig;
  /** Thermocouple replacements (maintenance events), oldest first; none when left out. */
  replacements?: ProbeReplacement[];
  /**
   * Maintenance events that start a new baseline period (fuel nozzles worked on, a combustion
   * inspection, combustor tuning), oldest first; none when left out.
   */
  periods?: PeriodEvent[];
}

/**
 * How the rings of one stretch of ring time stand to the baseline judging them (no event
 * between fromMs and untilMs): superseded by work on the machine, with the caution and the
 * drift inputs left after the work (the chambers concerned, and every thermocouple, whose
 * drift restarts), or current.
 */
export interface PeriodStanding {
  fromMs: number;
  untilMs: number;
  period: BaselinePeriod | null;
  /** Null when the baseline is current. */
  caution: string | null;
  /** Ring time an automatic fit from the period falls due; null when current. */
  fitDueMs: number | null;
  driftChambers: (ChamberDriftInput | null)[];
  driftThermocouples: (ChamberDriftInput | null)[];
}

export interface RingResult {
  /**
   * The ring's analysis row. Its arrays are the analyser's own buffers, valid until the next
   * call of analyse: write (or copy) the row before analysing the next ring.
   */
  row: AnalysisRow;
  /** Findings at the normal and the deadband thresholds; null when the unit is not in service (no observation). */
  raise: Finding[] | null;
  hold: Finding[] | null;
  /** Offsets of replaced probes learnt to the end with this ring, to be stored with it. */
  learnt: LearntOffset[] | null;
}

const MAX_M = 64;
/** Most rings the window tests look at. */
const WINDOW_TEST_RINGS = 60;

export class UnitAnalyser {
  private readonly contexts = new Map<number, UnitContext>();
  /** Residual buffers per prepared context. */
  private readonly residualBuffers = new Map<UnitContext, ResidualBuffers>();
  /** Working arrays of the worst-chamber verdict: probabilities, folded-normal CDFs, scatter. */
  private worstScratch = new Float64Array(0);
  private readonly steadyWindowS: number;
  private readonly windowMs: number;
  private readonly slotMs: number;
  /**
   * The memory of recent rings: the steady-state window, the window tests' rings and the recent
   * validity codes, in buffers sized from the unit's ring rate within its first rings
   * (windows.ts), so what a unit costs does not grow as its windows fill.
   */
  private readonly steadyWindow: SteadyWindow;
  private readonly readingsWindow: ReadingsWindow;
  private readonly recentCodes: RecentCodes;
  private lastSlot = NaN;
  private verdictsDue = false;
  private verdicts: WindowVerdict[] = [];
  /** The verdicts as a validity code per thermocouple, for the ring analysis to exclude them. */
  private readonly verdictCodes = new Uint8Array(MAX_M);
  private verdictM = 0;
  private prevSteadySpread: number | null = null;
  lastTsMs = -Infinity;
  /**
   * True while the unit has no alert condition pending or active (as the alert rules last left
   * it, and no finding since): then a ring without findings at the raise level needs no
   * findings at the hold level either, since the rules only use them to hold what is active.
   * False (evaluate both) until the caller says so.
   */
  alertsIdle = false;
  private readonly steadyOptions: SteadyStateOptions;
  private probeOffsets: ProbeOffsets | null = null;
  private standingCache: PeriodStanding | null = null;
  /** The combustion mode ring by ring, and whether a ring is inside a transfer (core/modes.ts). */
  private modes: ModeTracker;
  private modeBaseline: { source: UnitBaseline | null; mode: string | null; baseline: UnitBaseline | null; caution: string | null } | null = null;

  /** The baseline judging rings of `mode` (its own, or the all-mode one with a caution). */
  private baselineOf(mode: string | null): { baseline: UnitBaseline | null; caution: string | null } {
    const src = this.inputs.baseline;
    const c = this.modeBaseline;
    if (c && c.source === src && c.mode === mode) return c;
    const r = baselineForMode(src as ModalBaseline | null, mode);
    this.modeBaseline = { source: src, mode, ...r };
    return this.modeBaseline;
  }

  private unitThresholds: { raise: Thresholds; hold: Thresholds } | null = null;
  /** Thresholds of a mode whose unit configuration sets its own spread limit. */
  private modeThresholds: { key: string; raise: Thresholds; hold: Thresholds } | null = null;
  private thresholdsOf(cfg: { modes?: Record<string, { spreadLimitC?: number }> }, mode: string | null): { raise: Thresholds; hold: Thresholds } {
    const limit = mode === null ? undefined : cfg.modes?.[mode]?.spreadLimitC;
    if (limit === undefined) {
      const d = this.unitThresholds;
      if (d && d.raise === this.inputs.raise && d.hold === this.inputs.hold) return d;
      return (this.unitThresholds = { raise: this.inputs.raise, hold: this.inputs.hold });
    }
    const key = `${mode}|${limit}`;
    const c = this.modeThresholds;
    if (c && c.key === key && c.raise.spreadMarginDegC === this.inputs.raise.spreadMarginDegC) return c;
    // The mode's limit in place of the learnt one: floor, ceiling and default all at it; the
    // hold level keeps its deadband below the raise level.
    const fixed = (t: Thresholds, at: number): Thresholds => ({ ...t, spreadDefaultLimitDegC: at, spreadLimitFloorDegC: at, spreadLimitCeilingDegC: at });
    const band = this.inputs.raise.spreadDefaultLimitDegC - this.inputs.hold.spreadDefaultLimitDegC;
    this.modeThresholds = { key, raise: fixed(this.inputs.raise, limit), hold: fixed(this.inputs.hold, limit - band) };
    return this.modeThresholds;
  }

  /**
   * The baseline period in force at tsMs and how the baseline judging the rings stands in it
   * (core/baseline-periods.ts). Kept for the stretch of ring time up to the next event, so a
   * ring costs a comparison.
   */
  standingAt(tsMs: number): PeriodStanding {
    const c = this.standingCache;
    if (c && tsMs >= c.fromMs && tsMs < c.untilMs) return c;
    const events = (this.inputs.periods ?? []).filter((e) => (NEW_PERIOD_KINDS as readonly string[]).includes(e.kind));
    let fromMs = -Infinity;
    let untilMs = Infinity;
    for (const e of events) {
      if (e.atMs <= tsMs) fromMs = Math.max(fromMs, e.atMs);
      else untilMs = Math.min(untilMs, e.atMs);
    }
    const b = this.inputs.baseline;
    const period = baselinePeriodAt(events, tsMs);
    const st = baselineStanding(period, b ? Date.parse(b.window.from) : null, this.inputs.settings.baselineAutoDays);
    let driftChambers = this.inputs.driftChambers;
    let driftThermocouples = this.inputs.driftThermocouples;
    if (b && period && st.state === 'superseded') {
      // A change since the work is the work's: the chambers concerned and their neighbours (all,
      // for the whole unit) and the thermocouples are not judged for drift until the new fit.
      const n = this.inputs.versions.reduce((mx, v) => Math.max(mx, v.config.chambers.count), 0);
      const reached = chambersReached(period.chambers, n);
      driftChambers = driftChambers.map((d, k) => (reached.includes(k + 1) ? null : d));
      driftThermocouples = driftThermocouples.map(() => null);
    }
    const out: PeriodStanding = { fromMs, untilMs, period, caution: b ? st.caution : null, fitDueMs: b ? st.fitDueMs : null, driftChambers, driftThermocouples };
    this.standingCache = out;
    return out;
  }

  /** Findings of a mode judged on the all-mode baseline: said so, in their evidence. */
  private withModeCaution(findings: Finding[], caution: string): Finding[] {
    if (findings.length === 0) return findings;
    return findings.map((f) => ({ ...f, evidence: { ...f.evidence, modeCaution: caution } }));
  }

  /** Findings judged on a baseline from before the work: said so, in their evidence and message. */
  private withCaution(findings: Finding[], s: PeriodStanding): Finding[] {
    if (s.caution === null || findings.length === 0) return findings;
    const when = new Date(s.period!.fromMs).toISOString();
    return findings.map((f) => ({
      ...f,
      evidence: { ...f.evidence, baselineCaution: s.caution, workAt: when },
      message: `${f.message} (Judged on the baseline from before the work of ${when}; a new baseline is fitted after it.)`,
    }));
  }

  private buildProbeOffsets(): void {
    const r = this.inputs.replacements ?? [];
    const m = this.inputs.versions.reduce((mx, v) => Math.max(mx, v.config.thermocouples.count), 0);
    this.probeOffsets = r.length ? new ProbeOffsets(r.map((x) => ({ ...x })), m, this.inputs.settings.probeOffsetRings) : null;
    if (this.probeOffsets) this.probeOffsets.baselineToMs = this.inputs.baseline ? Date.parse(this.inputs.baseline.window.to) : -Infinity;
  }

  constructor(private inputs: AnalyserInputs) {
    this.buildProbeOffsets();
    this.steadyWindowS = inputs.settings.steadyWindowS;
    this.steadyOptions = { ...defaultSteadyStateOptions, windowS: this.steadyWindowS };
    this.buildSchedule();
    this.windowMs = inputs.settings.windowTestMinutes * 60_000;
    this.slotMs = inputs.settings.windowTestEveryMinutes * 60_000;
    this.steadyWindow = new SteadyWindow(this.steadyWindowS);
    this.readingsWindow = new ReadingsWindow(this.windowMs, WINDOW_TEST_RINGS);
    this.recentCodes = new RecentCodes(inputs.settings.recentRings, MAX_M, VALIDITY.isolated_outlier, VALIDITY.missing);
    this.modes = new ModeTracker(this.steadyWindowS * 1000);
  }

  /** New baseline, drift state or configuration versions; the memory of recent rings is kept. */
  setInputs(inputs: AnalyserInputs): void {
    const key = (i: AnalyserInputs) => i.versions.map((v) => `${v.version}@${v.effectiveFrom}`).join(',');
    const changed = key(inputs) !== key(this.inputs);
    const events = (i: AnalyserInputs) => `${i.baseline?.version ?? 0}|` + (i.replacements ?? []).map((r) => `${r.eventId}/${r.thermocouple}@${r.atMs}`).join(',');
    const eventsChanged = events(inputs) !== events(this.inputs);
    this.inputs = inputs;
    this.standingCache = null;
    if (eventsChanged) this.buildProbeOffsets();
    if (changed) {
      this.contexts.clear();
      this.residualBuffers.clear();
      this.buildSchedule();
    }
  }

  get baselineVersion(): number | null {
    return this.inputs.baseline ? this.inputs.baseline.version : null;
  }

  /** Configuration versions by the instant they take effect, oldest first. */
  private schedule: { fromMs: number; v: ConfigVersionRecord }[] = [];

  private buildSchedule(): void {
    this.schedule = this.inputs.versions
      .map((v) => ({ fromMs: v.effectiveFrom === null ? -Infinity : Date.parse(v.effectiveFrom), v }))
      .sort((a, b) => a.fromMs - b.fromMs);
  }

  /** The configuration in force at tsMs (the first version before any takes effect) and its prepared context. */
  private context(tsMs: number): { ctx: UnitContext; version: number } {
    const sch = this.schedule;
    let v = sch[0].v;
    for (let i = 1; i < sch.length && sch[i].fromMs <= tsMs; i++) v = sch[i].v;
    let ctx = this.contexts.get(v.version);
    if (!ctx) this.contexts.set(v.version, (ctx = prepareUnit(v.config)));
    return { ctx, version: v.version };
  }

  /**
   * Steady-state window: add (t, L), drop what is older than the window. When that sized the
   * window from the unit's ring rate, the window tests' rings get their room for that rate too.
   */
  private pushLoad(tS: number, load: number): void {
    const w = this.steadyWindow;
    if (w.push(tS, load) && Number.isFinite(w.ringSpacingS)) this.readingsWindow.reserve(w.ringSpacingS * 1000);
  }

  /**
   * Window-test readings: add a ring in service (starts, stops and running below the findings'
   * load move every reading for reasons that are not the sensors'), drop older than the window;
   * a new slot makes the verdicts due.
   */
  private pushReadings(tsMs: number, readings: Float64Array, load: number, inService: boolean): void {
    this.readingsWindow.push(tsMs, readings, load, inService);
    const slot = Math.floor(tsMs / this.slotMs);
    if (slot !== this.lastSlot) {
      this.lastSlot = slot;
      this.verdictsDue = true;
    }
  }

  /**
   * Runs the window tests when due, at the first ring in service of each slot (the tests only
   * feed findings, which are only evaluated in service), over the readings of the window.
   */
  private refreshVerdicts(m: number): void {
    if (!this.verdictsDue && m === this.verdictM) return;
    this.verdictsDue = false;
    this.verdictM = m;
    // At most WINDOW_TEST_RINGS rings, evenly spread over the window (seconds-apart transient
    // rings would otherwise make the tests cost far more than the ring analysis).
    const { rings, loads } = this.readingsWindow.pick(m, WINDOW_TEST_RINGS);
    this.verdicts = windowValidity(rings, m, undefined, undefined, undefined, loads).filter((v) => v.reason !== 'valid');
    this.verdictCodes.fill(VALIDITY.valid);
    for (const v of this.verdicts) if (v.thermocouple <= MAX_M) this.verdictCodes[v.thermocouple - 1] = VALIDITY[v.reason];
  }

  private inService(speedPct: number, load: number): boolean {
    const s = this.inputs.settings;
    return speedPct >= s.findingsMinSpeedPct && load >= s.findingsMinLoad;
  }

  /** Views of the first m entries of the per-thermocouple counters and verdict codes, made once per m. */
  private views: { m: number; verdictCodes: Uint8Array; outliers: Int32Array; missing: Int32Array } | null = null;
  private viewsFor(m: number): { verdictCodes: Uint8Array; outliers: Int32Array; missing: Int32Array } {
    if (this.views === null || this.views.m !== m)
      this.views = { m, verdictCodes: this.verdictCodes.subarray(0, m), outliers: this.recentCodes.outliers.subarray(0, m), missing: this.recentCodes.missing.subarray(0, m) };
    return this.views;
  }

  /**
   * Rebuilds the memory as of the last of `rings` (the stored rings just before the next one
   * to analyse, covering at least the longer of the two windows plus one slot), with the
   * last analysed rings' validity codes and the previous steady spread.
   */
  prime(rings: RingColumns, recent: AnalysisColumns, prevSteadySpread: number | null): void {
    for (let j = 0; j < rings.count; j++) {
      const t = rings.tsMs[j];
      const { ctx } = this.context(t);
      const load = correctedLoadFraction(rings.loadMw[j], rings.ambientC[j], rings.ambientKPa[j], ctx.config);
      this.pushLoad(t / 1000, load);
      this.modes.push(t, rings.mode ? rings.mode[j] : null);
      const inService = this.inService(rings.speedPct[j], load);
      this.pushReadings(t, rings.exhaustC[j], load, inService);
      if (inService) this.refreshVerdicts(ctx.m);
      this.lastTsMs = t;
    }
    for (let j = 0; j < recent.count; j++) this.recentCodes.push(recent.validity[j]);
    // A spread jump compares consecutive steady rings: none when the last analysed ring was not steady.
    this.prevSteadySpread = recent.count > 0 && recent.steady[recent.count - 1] ? prevSteadySpread : null;
  }

  /** Analyses the next ring (time order). */
  analyse(rings: RingColumns, j: number): RingResult {
    const tsMs = rings.tsMs[j];
    const { ctx, version } = this.context(tsMs);
    const cfg = ctx.config;
    const load = correctedLoadFraction(rings.loadMw[j], rings.ambientC[j], rings.ambientKPa[j], cfg);
    const speed = rings.speedPct[j];
    const readings = rings.exhaustC[j];
    this.pushLoad(tsMs / 1000, load);
    // A change of combustion mode is a transient: the rings of the transfer are not steady, and
    // findings are held through it (no observation: the alert rules keep what they have).
    const transfer = this.modes.push(tsMs, rings.mode ? rings.mode[j] : null);
    const st0 = this.steadyWindow.steadyAt(speed, tsMs / 1000, this.steadyOptions);
    const st = transfer && st0.steady ? { ...st0, steady: false } : st0;
    const inService = this.inService(speed, load);
    this.pushReadings(tsMs, readings, load, inService);
    if (inService) this.refreshVerdicts(ctx.m);
    // Thermocouples the window tests condemned are left out of this ring's spread and chamber map.
    const views = this.viewsFor(ctx.m);
    const a = analyseRing(ctx, readings, load, undefined, this.verdictM === ctx.m ? views.verdictCodes : undefined);
    const validity = a.validity;
    this.recentCodes.push(validity);

    // The baseline of the ring's mode (a unit without modes: the unit's baseline).
    const mb = this.baselineOf(this.modes.mode);
    const b = mb.baseline;
    const th = this.thresholdsOf(cfg, this.modes.mode);
    // Residuals against the baseline at this load: each thermocouple's deviation less its own
    // normal, and the chamber map of that pattern (chamberResidualsFromThermocouples). Findings
    // judge every ring in service by them; the stored analysis keeps them for steady rings.
    let res = null;
    let learnt: LearntOffset[] | null = null;
    if (b) {
      let buf = this.residualBuffers.get(ctx);
      if (!buf) this.residualBuffers.set(ctx, (buf = createResidualBuffers(ctx.m, ctx.n)));
      // A replaced probe's offset is learnt from the steady rings after the event and taken
      // off its residual (probe-offsets.ts): the new probe is not a step.
      const po = this.probeOffsets;
      if (po && st.steady && po.learningAt(tsMs)) {
        const done = po.learn(tsMs, a.deviationDegC, load, b);
        if (done.length) learnt = done;
      }
      res = baselineResidualsInto(ctx, a, b, buf, po ? po.at(tsMs) : null);
    }
    const tcRes = res ? res.thermocoupleDegC : null;
    const chamberRes = res ? res.chamberDegC : null;
    const tcResidual = st.steady ? tcRes : null;
    const chamberResidual = st.steady && tcRes ? (chamberRes ?? new Float64Array(ctx.n).fill(NaN)) : null;
    const limit = spreadLimitDegC(b, load, th.raise);

    let raise: Finding[] | null = null;
    let hold: Finding[] | null = null;
    if (inService && !transfer) {
      const history = {
        previousSteadySpreadDegC: this.prevSteadySpread,
        recentOutlierCounts: views.outliers,
        recentMissingCounts: views.missing,
        windowVerdicts: this.verdicts,
      };
      const standing = this.standingAt(tsMs);
      const drift = { chambers: standing.driftChambers, thermocouples: standing.driftThermocouples };
      const plumeShare = { left: ctx.loneShareLeft, right: ctx.loneShareRight, response: plumeResponseAt(ctx, load), coverResponse: ctx.options.plumeCoverResponse };
      raise = evaluateFindings({ analysis: a, steady: st.steady, history, baseline: b, residuals: res, plumeShare, drift, thresholds: th.raise, temperatureUnit: cfg.temperatureUnit });
      if (raise.length > 0) this.alertsIdle = false;
      hold = this.alertsIdle ? [] : evaluateFindings({ analysis: a, steady: st.steady, history, baseline: b, residuals: res, plumeShare, drift, thresholds: th.hold, temperatureUnit: cfg.temperatureUnit });
      if (standing.caution !== null) {
        raise = this.withCaution(raise, standing);
        hold = this.withCaution(hold, standing);
      }
      if (mb.caution !== null) {
        raise = this.withModeCaution(raise, mb.caution);
        hold = this.withModeCaution(hold, mb.caution);
      }
    }
    // A spread jump is a change between consecutive steady rings: a ring that is not steady (a
    // start, a stop, a load change) ends the comparison, so the first steady ring after it is not
    // compared with the spread before it, at another load or before a shutdown.
    if (st.steady && Number.isFinite(a.spread.spreadDegC)) this.prevSteadySpread = a.spread.spreadDegC;
    else if (!st.steady) this.prevSteadySpread = null;
    this.lastTsMs = tsMs;

    const worst = this.worstChamber(ctx, a.loadFraction, st.steady && inService, b, res, raise);
    const sp = a.spread;
    const row: AnalysisRow = {
      tsMs,
      configVersion: version,
      baselineVersion: b ? b.version : null,
      loadFraction: load,
      steady: st.steady,
      spread: sp.spreadDegC,
      spreadExcl1: sp.spreadExcl1DegC,
      spreadExcl2: sp.spreadExcl2DegC,
      spreadLimit: limit.limitDegC,
      limitFromBaseline: limit.fromBaseline,
      ringMean: sp.meanDegC,
      robustCentre: sp.robustCentreDegC,
      stdDev: sp.stdDevDegC,
      hottestTc: sp.hottestThermocouple,
      coldestTc: sp.coldestThermocouple,
      secondColdestTc: sp.secondColdestThermocouple,
      coldestAdjacent: sp.coldestAdjacent,
      validCount: a.coverage.validCount,
      coverageDegraded: a.coverage.degraded,
      validity,
      tcDeviation: a.deviationDegC,
      tcResidual,
      swirlDeg: a.swirlDeg,
      chamberDeviation: a.chamberDeviationDegC,
      chamberUncertainty: a.chamberUncertaintyDegC,
      chamberResidual,
      ringLevel: a.ringLevelDegC,
      fitSd: a.fitResidualSdDegC,
      worstChamber: worst.chamber,
      worstLikelihood: worst.likelihood ?? NaN,
      runnerUpChamber: worst.runnerUpChamber,
      runnerUpLikelihood: worst.runnerUpLikelihood ?? NaN,
      worstGrade: raise && raise.length ? gradeRank(raise[0].grade) : null,
      findingsJson: raise && raise.length ? JSON.stringify(raise.map((f) => ({ kind: f.kind, grade: f.grade, chamber: f.chamber, thermocouple: f.thermocouple }))) : null,
    };
    return { row, raise, hold, learnt };
  }

  /**
   * The ring's worst chamber (core/worst-chamber.ts): judged on steady rings in service against
   * the baseline, from the chamber residuals with faulty probes left out, naming the chamber of
   * the ring's most severe chamber finding when there is one.
   */
  private worstChamber(ctx: UnitContext, load: number, atLoad: boolean, b: UnitBaseline | null, res: BaselineResiduals | null, raise: Finding[] | null): WorstChamberVerdict {
    const n = ctx.n;
    if (this.worstScratch.length !== 3 * n) this.worstScratch = new Float64Array(3 * n);
    const probs = this.worstScratch.subarray(0, n);
    const cdf = this.worstScratch.subarray(n, 2 * n);
    const scatter = this.worstScratch.subarray(2 * n, 3 * n);
    const has = b !== null && atLoad && chamberScatterInto(b, load, n, res?.chamberUncertaintyDegC ?? null, scatter) > 0;
    const findings: ChamberFindingRef[] = [];
    for (const f of raise ?? []) {
      if ((f.kind === 'chamber_cold' || f.kind === 'chamber_hot') && f.chamber !== null) findings.push({ chamber: f.chamber, gradeRank: gradeRank(f.grade), magnitudeDegC: Math.abs(Number(f.evidence.residualDegC) || 0) });
    }
    return worstChamberVerdict({ atLoad, hasBaseline: has, residualDegC: res?.chamberDegC ?? null, scatterDegC: scatter, n, findings }, probs, cdf);
  }

  /** How far back stored rings must reach to prime the memory as of atMs. */
  contextStartMs(atMs: number): number {
    const slotStart = Math.floor(atMs / this.slotMs) * this.slotMs;
    return Math.min(atMs - this.steadyWindowS * 1000, slotStart - this.windowMs);
  }
}
