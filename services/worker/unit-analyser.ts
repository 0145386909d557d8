/**
 * One unit's ring-by-ring analysis with the memory it needs between rings: the recent loads
 * for the steady-state test, the recent readings for the window tests (frozen, erratic,
 * drifting alone), the recent validity codes (recurring outliers and gaps) and the spread of
 * the previous steady ring. That memory is a function of the ring history only, so `prime`
 * rebuilds it from stored rings and analysis after a restart or a takeover and the next ring
 * is analysed exactly as it would have been without the interruption. No I/O here.
 */
import { analyseRing, baselineResidualsInto, createResidualBuffers, prepareUnit, type ResidualBuffers, type UnitContext } from '../core/ring.ts';
import type { UnitBaseline } from '../core/baseline.ts';
import { correctedLoadFraction, defaultSteadyStateOptions, steadyState, steadyStateOfWindow, type SteadyStateOptions, type SteadyStateResult } from '../core/correction.ts';
import { evaluateFindings, gradeRank, spreadLimitDegC, type ChamberDriftInput, type Finding, type Thresholds } from '../core/findings.ts';
import { VALIDITY } from '../core/types.ts';
import { windowValidity, type WindowVerdict } from '../core/validity.ts';
import type { WorkerConfig } from '../db/config.ts';
import type { AnalysisColumns, AnalysisRow, RingColumns } from '../db/analysis.ts';
import type { ConfigVersionRecord } from '../db/units.ts';

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
}

const MAX_M = 64;
/** Most rings the window tests look at. */
const WINDOW_TEST_RINGS = 60;

export class UnitAnalyser {
  private readonly contexts = new Map<number, UnitContext>();
  /** Residual buffers per prepared context. */
  private readonly residualBuffers = new Map<UnitContext, ResidualBuffers>();
  private readonly steadyWindowS: number;
  private readonly windowMs: number;
  private readonly slotMs: number;
  // Steady-state window: times (s) and corrected loads from stHead on (older ones are dropped
  // in bulk), with running minimum and maximum queues of the finite loads (indices into stT /
  // stL, from minHead / maxHead on) and their count, so a ring's test does not scan the window.
  private stT: number[] = [];
  private stL: number[] = [];
  private stHead = 0;
  private stFinite = 0;
  private minQ: number[] = [];
  private minHead = 0;
  private maxQ: number[] = [];
  private maxHead = 0;
  /** A sample arrived out of time order: the window is then scanned (steadyState) as it stands. */
  private stUnordered = false;
  // Window tests: times (ms), readings and corrected loads of the rings in service.
  private wT: number[] = [];
  private wR: Float64Array[] = [];
  private wL: number[] = [];
  private lastSlot = NaN;
  private verdictsDue = false;
  private verdicts: WindowVerdict[] = [];
  /** The verdicts as a validity code per thermocouple, for the ring analysis to exclude them. */
  private readonly verdictCodes = new Uint8Array(MAX_M);
  private verdictM = 0;
  // Recent validity codes.
  private codes: Uint8Array[] = [];
  private codesHead = 0;
  private readonly outliers = new Int32Array(MAX_M);
  private readonly missing = new Int32Array(MAX_M);
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

  constructor(private inputs: AnalyserInputs) {
    this.steadyWindowS = inputs.settings.steadyWindowS;
    this.steadyOptions = { ...defaultSteadyStateOptions, windowS: this.steadyWindowS };
    this.buildSchedule();
    this.windowMs = inputs.settings.windowTestMinutes * 60_000;
    this.slotMs = inputs.settings.windowTestEveryMinutes * 60_000;
  }

  /** New baseline, drift state or configuration versions; the memory of recent rings is kept. */
  setInputs(inputs: AnalyserInputs): void {
    const key = (i: AnalyserInputs) => i.versions.map((v) => `${v.version}@${v.effectiveFrom}`).join(',');
    const changed = key(inputs) !== key(this.inputs);
    this.inputs = inputs;
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

  /** Steady-state window: add (t, L), drop what is older than the window. */
  private pushLoad(tS: number, load: number): void {
    const T = this.stT;
    const Lw = this.stL;
    if (T.length > this.stHead && !(tS >= T[T.length - 1])) this.stUnordered = true;
    const idx = T.length;
    T.push(tS);
    Lw.push(load);
    if (Number.isFinite(load)) {
      this.stFinite++;
      const minQ = this.minQ;
      while (minQ.length > this.minHead && Lw[minQ[minQ.length - 1]] >= load) minQ.pop();
      minQ.push(idx);
      const maxQ = this.maxQ;
      while (maxQ.length > this.maxHead && Lw[maxQ[maxQ.length - 1]] <= load) maxQ.pop();
      maxQ.push(idx);
    }
    let k = this.stHead;
    const from = tS - this.steadyWindowS;
    while (k < T.length && T[k] < from) {
      if (Number.isFinite(Lw[k])) this.stFinite--;
      k++;
    }
    this.stHead = k;
    while (this.minHead < this.minQ.length && this.minQ[this.minHead] < k) this.minHead++;
    while (this.maxHead < this.maxQ.length && this.maxQ[this.maxHead] < k) this.maxHead++;
    // Drop the dead front in bulk once it outweighs the live part.
    if (k > 64 && k > T.length - k) {
      T.splice(0, k);
      Lw.splice(0, k);
      this.minQ = this.minQ.slice(this.minHead).map((i) => i - k);
      this.maxQ = this.maxQ.slice(this.maxHead).map((i) => i - k);
      this.stHead = 0;
      this.minHead = 0;
      this.maxHead = 0;
    }
  }

  /**
   * steadyState over the window at atS (the time just pushed). With samples in time order every
   * sample left in the window lies in [atS − windowS, atS], so the running summary is exactly what
   * steadyState would gather; otherwise the window is scanned.
   */
  private steadyAt(speedPct: number, atS: number): SteadyStateResult {
    const o = this.steadyOptions;
    if (this.stUnordered) return steadyState(speedPct, this.stT.slice(this.stHead), this.stL.slice(this.stHead), atS, o);
    const n = this.stFinite;
    if (n === 0) return steadyStateOfWindow(speedPct, atS, 0, Infinity, -Infinity, Infinity, o);
    let first = this.stHead;
    while (!Number.isFinite(this.stL[first])) first++;
    return steadyStateOfWindow(speedPct, atS, n, this.stL[this.minQ[this.minHead]], this.stL[this.maxQ[this.maxHead]], this.stT[first], o);
  }

  /**
   * Window-test readings: add a ring in service (starts, stops and running below the findings'
   * load move every reading for reasons that are not the sensors'), drop older than the window;
   * a new slot makes the verdicts due.
   */
  private pushReadings(tsMs: number, readings: Float64Array, load: number, inService: boolean): void {
    if (inService) {
      this.wT.push(tsMs);
      this.wR.push(readings);
      this.wL.push(load);
    }
    let k = 0;
    const from = tsMs - this.windowMs;
    while (k < this.wT.length && this.wT[k] < from) k++;
    if (k > 0) {
      this.wT.splice(0, k);
      this.wR.splice(0, k);
      this.wL.splice(0, k);
    }
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
    const all: number[] = [];
    for (let i = 0; i < this.wR.length; i++) if (this.wR[i].length === m) all.push(i);
    // At most WINDOW_TEST_RINGS rings, evenly spread over the window (seconds-apart transient
    // rings would otherwise make the tests cost far more than the ring analysis).
    const step = Math.max(1, Math.ceil(all.length / WINDOW_TEST_RINGS));
    const pick = step === 1 ? all : all.filter((_, i) => (all.length - 1 - i) % step === 0);
    const rings = pick.map((i) => this.wR[i]);
    const loads = pick.map((i) => this.wL[i]);
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
      this.views = { m, verdictCodes: this.verdictCodes.subarray(0, m), outliers: this.outliers.subarray(0, m), missing: this.missing.subarray(0, m) };
    return this.views;
  }

  /**
   * Recent validity codes: add (a copy of) them, count outliers and gaps, drop the oldest
   * beyond recentRings. The copy goes into the dropped ring's array when it has the same length.
   */
  private pushCodes(src: Uint8Array): void {
    const cap = this.inputs.settings.recentRings;
    let codes: Uint8Array;
    if (this.codes.length >= cap) {
      const old = this.codes[this.codesHead];
      for (let i = 0; i < Math.min(old.length, MAX_M); i++) {
        if (old[i] === VALIDITY.isolated_outlier) this.outliers[i]--;
        else if (old[i] === VALIDITY.missing) this.missing[i]--;
      }
      if (old.length === src.length) {
        old.set(src);
        codes = old;
      } else codes = src.slice();
      this.codes[this.codesHead] = codes;
      this.codesHead = (this.codesHead + 1) % cap;
    } else this.codes.push((codes = src.slice()));
    const m = Math.min(codes.length, MAX_M);
    for (let i = 0; i < m; i++) {
      if (codes[i] === VALIDITY.isolated_outlier) this.outliers[i]++;
      else if (codes[i] === VALIDITY.missing) this.missing[i]++;
    }
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
      const inService = this.inService(rings.speedPct[j], load);
      this.pushReadings(t, rings.exhaustC[j], load, inService);
      if (inService) this.refreshVerdicts(ctx.m);
      this.lastTsMs = t;
    }
    for (let j = 0; j < recent.count; j++) this.pushCodes(Uint8Array.from(recent.validity[j]));
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
    const st = this.steadyAt(speed, tsMs / 1000);
    const inService = this.inService(speed, load);
    this.pushReadings(tsMs, readings, load, inService);
    if (inService) this.refreshVerdicts(ctx.m);
    // Thermocouples the window tests condemned are left out of this ring's spread and chamber map.
    const views = this.viewsFor(ctx.m);
    const a = analyseRing(ctx, readings, load, undefined, this.verdictM === ctx.m ? views.verdictCodes : undefined);
    const validity = a.validity;
    this.pushCodes(validity);

    const b = this.inputs.baseline;
    // Residuals against the baseline at this load: each thermocouple's deviation less its own
    // normal, and the chamber map of that pattern (chamberResidualsFromThermocouples). Findings
    // judge every ring in service by them; the stored analysis keeps them for steady rings.
    let res = null;
    if (b) {
      let buf = this.residualBuffers.get(ctx);
      if (!buf) this.residualBuffers.set(ctx, (buf = createResidualBuffers(ctx.m, ctx.n)));
      res = baselineResidualsInto(ctx, a, b, buf);
    }
    const tcRes = res ? res.thermocoupleDegC : null;
    const chamberRes = res ? res.chamberDegC : null;
    const tcResidual = st.steady ? tcRes : null;
    const chamberResidual = st.steady && tcRes ? (chamberRes ?? new Float64Array(ctx.n).fill(NaN)) : null;
    const limit = spreadLimitDegC(b, load, this.inputs.raise);

    let raise: Finding[] | null = null;
    let hold: Finding[] | null = null;
    if (inService) {
      const history = {
        previousSteadySpreadDegC: this.prevSteadySpread,
        recentOutlierCounts: views.outliers,
        recentMissingCounts: views.missing,
        windowVerdicts: this.verdicts,
      };
      const drift = { chambers: this.inputs.driftChambers, thermocouples: this.inputs.driftThermocouples };
      const plumeShare = { left: ctx.responseLeft, right: ctx.responseRight };
      raise = evaluateFindings({ analysis: a, steady: st.steady, history, baseline: b, residuals: res, plumeShare, drift, thresholds: this.inputs.raise, temperatureUnit: cfg.temperatureUnit });
      if (raise.length > 0) this.alertsIdle = false;
      hold = this.alertsIdle ? [] : evaluateFindings({ analysis: a, steady: st.steady, history, baseline: b, residuals: res, plumeShare, drift, thresholds: this.inputs.hold, temperatureUnit: cfg.temperatureUnit });
    }
    // A spread jump is a change between consecutive steady rings: a ring that is not steady (a
    // start, a stop, a load change) ends the comparison, so the first steady ring after it is not
    // compared with the spread before it, at another load or before a shutdown.
    if (st.steady && Number.isFinite(a.spread.spreadDegC)) this.prevSteadySpread = a.spread.spreadDegC;
    else if (!st.steady) this.prevSteadySpread = null;
    this.lastTsMs = tsMs;

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
      worstChamber: a.worstChamber,
      worstLikelihood: a.worstChamberLikelihood,
      runnerUpChamber: a.runnerUpChamber,
      runnerUpLikelihood: a.runnerUpLikelihood,
      worstGrade: raise && raise.length ? gradeRank(raise[0].grade) : null,
      findingsJson: raise && raise.length ? JSON.stringify(raise.map((f) => ({ kind: f.kind, grade: f.grade, chamber: f.chamber, thermocouple: f.thermocouple }))) : null,
    };
    return { row, raise, hold };
  }

  /** How far back stored rings must reach to prime the memory as of atMs. */
  contextStartMs(atMs: number): number {
    const slotStart = Math.floor(atMs / this.slotMs) * this.slotMs;
    return Math.min(atMs - this.steadyWindowS * 1000, slotStart - this.windowMs);
  }
}
