/**
 * Findings: one function from (ring analysis, recent history, baseline, drift state,
 * thresholds) to the findings a person should see, each with a grade, the chamber (with the
 * runner-up chamber and its likelihood) or the thermocouple, the evidence numbers, the baseline
 * version used and a plain next step. Every limit is in `Thresholds`; nothing is hidden in the
 * code. Stateless: on-delay, deadband and the life of an alert belong to the worker.
 */
import { baselineAt, baselineMedianScaleInto, type UnitBaseline } from './baseline.ts';
import { attributeChamber, type ChamberAttribution } from './chambers.ts';
import type { CusumState, DriftRate } from './drift.ts';
import { medianOfSorted, sortPrefixInPlace } from './stats.ts';
import type { BaselineResiduals, RingAnalysis } from './ring.ts';
import { VALIDITY, VALIDITY_REASONS, type ValidityReason } from './types.ts';
import { loneThermocouple, type WindowVerdict } from './validity.ts';

export type FindingKind = 'thermocouple_fault' | 'coverage_degraded' | 'spread_high' | 'spread_jump' | 'chamber_cold' | 'chamber_hot' | 'chamber_drift';
export type Grade = 'notice' | 'warning' | 'alarm' | 'critical';
export const GRADES: readonly Grade[] = ['notice', 'warning', 'alarm', 'critical'];

/** Rank of a grade: notice 0 … critical 3. */
export function gradeRank(g: Grade): number {
  return GRADES.indexOf(g);
}

/** The more severe of two grades. */
export function maxGrade(a: Grade, b: Grade): Grade {
  return gradeRank(a) >= gradeRank(b) ? a : b;
}

/** Said wherever findings are shown (DOMAIN §11). */
export const ADVISORY_CAUTION =
  "Cansight advises; it does not protect. The turbine's own control and protection system, the manufacturer's limits and the site's procedures govern every operating decision. Work on fuel systems, combustors and thermocouple circuits is for qualified people under the site's permit rules.";

export interface Finding {
  kind: FindingKind;
  grade: Grade;
  /** Numbered from 1, or null. */
  chamber: number | null;
  thermocouple: number | null;
  /** Likelihood that `chamber` is the right one (swirl is uncertain), 0–1. */
  likelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
  evidence: Record<string, number | string | boolean | null>;
  baselineVersion: number | null;
  message: string;
  advice: string;
}

/** Every limit used by `evaluateFindings`. Temperatures °C, rates °C per 30 days. */
export interface Thresholds {
  /** Spread limit before a baseline exists (common practice: healthy base-load spread about 15–45 °C). */
  spreadDefaultLimitDegC: number;
  /** Margin added to the baseline's high spread quantile at L. */
  spreadMarginDegC: number;
  /** Clamp of the learnt spread limit (common practice: investigation levels of roughly 30–45 °C). */
  spreadLimitFloorDegC: number;
  spreadLimitCeilingDegC: number;
  /** Spread over the limit by this much or more is an alarm; by the critical amount, critical. */
  spreadAlarmExcessDegC: number;
  spreadCriticalExcessDegC: number;
  /** Change in spread between consecutive steady rings: warning / alarm levels. */
  spreadJumpWarningDegC: number;
  spreadJumpAlarmDegC: number;
  /**
   * Chamber residual below −level (after the baseline and common mode): grades. The warnings
   * (12 °C cold and hot, engineering judgement) are well above the largest residual healthy
   * simulated units showed over 39 days (4.8 °C in the scorecard fleet; chamber residuals are the map of each
   * thermocouple's departure from its own normal, ring.ts baselineResiduals), and close to the
   * 10 °C depth at which a plugging nozzle is worth an engineer's look.
   */
  chamberColdWarningDegC: number;
  chamberColdAlarmDegC: number;
  chamberColdCriticalDegC: number;
  /** Chamber residual above +level: grades. */
  chamberHotWarningDegC: number;
  chamberHotAlarmDegC: number;
  chamberHotCriticalDegC: number;
  /** The residual must exceed this many σ (estimate uncertainty, baseline scale). */
  chamberMinZ: number;
  /**
   * Without a baseline at this load, chamber levels are multiplied by this (the ring's built-in
   * asymmetry is not removed). 2.5: a healthy chamber's fixed fuel-share fingerprint of a few
   * per cent, seen through the plume fit, departs from the average chamber by up to about 40 °C
   * (healthy base-load spreads of 15–45 °C are common practice), so at 1.5 (a warning at 30 °C)
   * healthy units with one thermocouple per chamber raised chamber warnings whenever they ran at
   * a load their baseline had no bin for. At 2.5 a cold alarm needs 100 °C; a lost flame
   * (order 100 °C and more) is still an alarm or critical at once.
   */
  noBaselineChamberFactor: number;
  /** Without a baseline at this load, a chamber warning needs this residual, °C (for the same reason: 50). */
  chamberNoBaselineWarningDegC: number;
  /** Swirl uncertainty for the runner-up chamber's likelihood, degrees. */
  swirlUncertaintyDeg: number;
  /**
   * Significant drift rate magnitudes: warning / alarm, °C per 30 days. A CUSUM signal without
   * a significant rate of at least the warning level is a notice: the CUSUM on daily residuals
   * standardised by a scale floored at about 1 °C signals on shifts of a degree or two (a season's
   * ambient, a thermocouple's fault moving the chamber map beside it), which tell an engineer to
   * look at the trend but give nothing to act on; on healthy units it raised several chamber
   * warnings a month.
   */
  driftWarningDegCPer30Days: number;
  driftAlarmDegCPer30Days: number;
  /** Coverage worse than these is an alarm rather than a warning. */
  coverageAlarmFraction: number;
  coverageAlarmAdjacentInvalid: number;
  /** An isolated outlier seen in at least this many of the recent rings is a warning, else a notice. */
  outlierRecurringRings: number;
  /** A missing reading in at least this many recent rings is reported (a single gap is not). */
  missingRecurringRings: number;
}

/** Default thresholds: engineering judgement unless the field says common practice. */
export const defaultThresholds: Thresholds = {
  spreadDefaultLimitDegC: 45,
  spreadMarginDegC: 10,
  spreadLimitFloorDegC: 30,
  spreadLimitCeilingDegC: 80,
  spreadAlarmExcessDegC: 15,
  spreadCriticalExcessDegC: 40,
  spreadJumpWarningDegC: 15,
  spreadJumpAlarmDegC: 40,
  chamberColdWarningDegC: 12,
  chamberColdAlarmDegC: 40,
  chamberColdCriticalDegC: 80,
  chamberHotWarningDegC: 12,
  chamberHotAlarmDegC: 35,
  chamberHotCriticalDegC: 60,
  chamberMinZ: 3,
  noBaselineChamberFactor: 2.5,
  chamberNoBaselineWarningDegC: 50,
  swirlUncertaintyDeg: 8,
  driftWarningDegCPer30Days: 5,
  driftAlarmDegCPer30Days: 15,
  coverageAlarmFraction: 0.5,
  coverageAlarmAdjacentInvalid: 3,
  outlierRecurringRings: 3,
  missingRecurringRings: 3,
};

/** What the worker remembers between rings. All optional. */
export interface FindingHistory {
  /** Spread of the previous steady ring, °C. */
  previousSteadySpreadDegC?: number | null;
  /** Per thermocouple (index 0 = thermocouple 1): recent rings in which it was an isolated outlier. */
  recentOutlierCounts?: ArrayLike<number>;
  /** Per thermocouple: recent rings in which it was missing. */
  recentMissingCounts?: ArrayLike<number>;
  /** Window tests over recent rings (frozen, erratic, drifting alone). */
  windowVerdicts?: readonly WindowVerdict[];
}

/** Drift state per chamber (index 0 = chamber 1). */
export interface ChamberDriftInput {
  cusum?: CusumState | null;
  rate?: DriftRate | null;
}

export interface FindingInput {
  analysis: RingAnalysis;
  /** Whether this ring passed the steady-state test. Spread jumps are judged on steady rings only. */
  steady: boolean;
  history?: FindingHistory;
  baseline?: UnitBaseline | null;
  /**
   * Departures from the baseline at this load, when there is one (ring.ts baselineResiduals):
   * per thermocouple, per chamber (the chamber map of the thermocouples' pattern, without a
   * thermocouple that departs alone) and that thermocouple. Without them a chamber's residual
   * is its deviation less its chamber baseline.
   */
  residuals?: Pick<BaselineResiduals, 'thermocoupleDegC' | 'chamberDegC' | 'chamberUncertaintyDegC' | 'lone'> | null;
  /**
   * The plume kernel's response at each thermocouple's left and right neighbour, relative to
   * its peak (UnitContext.responseLeft / responseRight): how much of a chamber's plume peaking
   * on a thermocouple its neighbours must see. With it, a departure that stays on one
   * thermocouple is reported as that sensor's, not as a chamber's.
   */
  plumeShare?: { left: ArrayLike<number>; right: ArrayLike<number> };
  /** Drift state per chamber and per thermocouple (index 0 = number 1). */
  drift?: { chambers?: readonly (ChamberDriftInput | null | undefined)[]; thermocouples?: readonly (ChamberDriftInput | null | undefined)[] };
  thresholds?: Partial<Thresholds>;
  /** How people see this unit: messages give temperature differences in it (evidence stays °C). Default °C. */
  temperatureUnit?: 'C' | 'F';
}

/** A temperature difference in °C as people of a unit read it: °C, or °F (× 1.8), one decimal. */
export function differenceText(deltaDegC: number, unit: 'C' | 'F' = 'C'): string {
  const v = unit === 'F' ? deltaDegC * 1.8 : deltaDegC;
  return Number.isFinite(v) ? `${Math.round(v * 10) / 10} °${unit}` : '—';
}

/**
 * Spread limit at load L: baseline high spread quantile + margin, clamped to [floor, ceiling];
 * the default limit when there is no baseline at L.
 */
export function spreadLimitDegC(baseline: UnitBaseline | null | undefined, loadFraction: number, t: Thresholds = defaultThresholds): { limitDegC: number; fromBaseline: boolean } {
  const b = baseline ? baselineAt(baseline.spread, loadFraction) : null;
  if (!b) return { limitDegC: t.spreadDefaultLimitDegC, fromBaseline: false };
  const raw = b.high + t.spreadMarginDegC;
  return { limitDegC: Math.min(Math.max(raw, t.spreadLimitFloorDegC), t.spreadLimitCeilingDegC), fromBaseline: true };
}

function r1(v: number): number | null {
  return Number.isFinite(v) ? Math.round(v * 10) / 10 : null;
}

function r3(v: number): number | null {
  return Number.isFinite(v) ? Math.round(v * 1000) / 1000 : null;
}

/** Evaluates every rule for one analysed ring. Returns findings, most severe first. */
export function evaluateFindings(input: FindingInput): Finding[] {
  const t = resolvedThresholds(input.thresholds);
  const a = input.analysis;
  const version = input.baseline ? input.baseline.version : null;
  const out: Finding[] = [];
  thermocoupleFindings(input, t, version, out);
  coverageFinding(a, t, version, out);
  spreadFindings(input, t, version, out);
  chamberFindings(input, t, version, out);
  driftFindings(input, t, version, out);
  if (out.length === 0) return out;
  return foldSpreadIntoChamber(out, a.chamberCount, input.temperatureUnit).sort(moreSevereFirst);
}

/** Threshold objects seen to name every threshold: used as they are, not merged over the defaults. */
const completeThresholds = new WeakSet<object>();
const THRESHOLD_KEYS = Object.keys(defaultThresholds);

/** The thresholds over the defaults; a complete set (as the worker passes on every ring) is used as it is. */
function resolvedThresholds(given: Partial<Thresholds> | undefined): Thresholds {
  if (given === undefined) return { ...defaultThresholds };
  if (completeThresholds.has(given)) return given as Thresholds;
  for (const k of THRESHOLD_KEYS) if (!Object.prototype.hasOwnProperty.call(given, k)) return { ...defaultThresholds, ...given };
  completeThresholds.add(given);
  return given as Thresholds;
}

function moreSevereFirst(x: Finding, y: Finding): number {
  return gradeRank(y.grade) - gradeRank(x.grade);
}

/**
 * One event, one alert: a high spread or a spread jump that a chamber finding of the same ring
 * explains (it names that chamber or the one beside it) is folded into the chamber finding,
 * whose evidence and message then carry the spread and whose grade is the more severe of the
 * two (ISA-18.2 designed suppression of consequential alarms; a lost flame otherwise raises a
 * chamber alert, a spread alert and a jump alert at once).
 */
/** Two chambers (numbered from 1) of n are the same or neighbours on the ring. */
function adjacentOrSame(a: number, b: number, n: number): boolean {
  return a === b || (a - b + n) % n === 1 || (b - a + n) % n === 1;
}

function foldSpreadIntoChamber(findings: Finding[], n: number, unit: 'C' | 'F' | undefined): Finding[] {
  let any = false;
  for (const f of findings) if ((f.kind === 'chamber_cold' || f.kind === 'chamber_hot') && f.chamber !== null) any = true;
  if (!any) return findings;
  const chambers = findings.filter((f) => (f.kind === 'chamber_cold' || f.kind === 'chamber_hot') && f.chamber !== null);
  return findings.filter((f) => {
    if ((f.kind !== 'spread_high' && f.kind !== 'spread_jump') || f.chamber === null) return true;
    const host = chambers.find((c) => adjacentOrSame(c.chamber as number, f.chamber as number, n));
    if (!host) return true;
    host.grade = maxGrade(host.grade, f.grade);
    if (f.kind === 'spread_high') {
      host.evidence = { ...host.evidence, spreadDegC: f.evidence.spreadDegC, spreadLimitDegC: f.evidence.limitDegC };
      host.message += `; exhaust spread ${differenceText(f.evidence.spreadDegC as number, unit)} is over its limit ${differenceText(f.evidence.limitDegC as number, unit)}`;
    } else {
      host.evidence = { ...host.evidence, spreadJumpDegC: f.evidence.jumpDegC };
      host.message += `; exhaust spread changed by ${differenceText(f.evidence.jumpDegC as number, unit)} since the previous steady ring`;
    }
    return false;
  });
}

function tcFinding(tc: number, grade: Grade, reason: ValidityReason, evidence: Finding['evidence'], version: number | null, message: string): Finding {
  return {
    kind: 'thermocouple_fault',
    grade,
    chamber: null,
    thermocouple: tc,
    likelihood: null,
    runnerUpChamber: null,
    runnerUpLikelihood: null,
    evidence: { reason, ...evidence },
    baselineVersion: version,
    message,
    advice: `check thermocouple ${tc} and its wiring at the next opportunity`,
  };
}

function thermocoupleFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const a = input.analysis;
  const h = input.history ?? {};
  const seen = new Set<number>();
  for (let i = 0; i < a.thermocoupleCount; i++) {
    const code = a.validity[i];
    const tc = i + 1;
    if (code === VALIDITY.out_of_range) {
      out.push(tcFinding(tc, 'warning', 'out_of_range', {}, version, `thermocouple ${tc} reads outside the plausible range`));
      seen.add(tc);
    } else if (code === VALIDITY.isolated_outlier) {
      const n = h.recentOutlierCounts ? h.recentOutlierCounts[i] ?? 0 : 0;
      const grade: Grade = n >= t.outlierRecurringRings ? 'warning' : 'notice';
      out.push(tcFinding(tc, grade, 'isolated_outlier', { recentOutlierRings: n, ringCentreDegC: r1(a.spread.robustCentreDegC) }, version, `thermocouple ${tc} disagrees with both neighbours`));
      seen.add(tc);
    } else if (code === VALIDITY.missing) {
      const n = h.recentMissingCounts ? h.recentMissingCounts[i] ?? 0 : 0;
      if (n >= t.missingRecurringRings) {
        out.push(tcFinding(tc, 'notice', 'missing', { recentMissingRings: n }, version, `thermocouple ${tc} has not reported in ${n} recent rings`));
        seen.add(tc);
      }
    } else if (code !== VALIDITY.valid) {
      const reason = VALIDITY_REASONS[code];
      out.push(tcFinding(tc, 'warning', reason, {}, version, `thermocouple ${tc} is ${reason.replace('_', ' ')}`));
      seen.add(tc);
    }
  }
  const lone = input.baseline ? input.residuals?.lone ?? null : null;
  if (lone && !seen.has(lone.thermocouple)) {
    const tc = lone.thermocouple;
    const res = input.residuals!.thermocoupleDegC;
    const [l, r] = [(tc - 2 + a.thermocoupleCount) % a.thermocoupleCount, tc % a.thermocoupleCount];
    out.push(
      tcFinding(
        tc,
        'warning',
        'drifting_alone',
        { residualDegC: r1(lone.residualDegC), leftNeighbourResidualDegC: r1(res[l]), rightNeighbourResidualDegC: r1(res[r]), loadFraction: r3(a.loadFraction) },
        version,
        `thermocouple ${tc} reads ${differenceText(Math.abs(lone.residualDegC), unit)} ${lone.residualDegC < 0 ? 'below' : 'above'} its normal at this load while its neighbours hold: the sensor, not a chamber`,
      ),
    );
    seen.add(tc);
  }
  for (const v of h.windowVerdicts ?? []) {
    if (v.reason === 'valid' || seen.has(v.thermocouple)) continue;
    out.push(
      tcFinding(
        v.thermocouple,
        'warning',
        v.reason,
        { rangeDegC: r1(v.rangeDegC), stepRmsDegC: r1(v.stepRmsDegC), residualChangeDegC: r1(v.residualChangeDegC), rings: v.usableRings },
        version,
        `thermocouple ${v.thermocouple} is ${v.reason.replace('_', ' ')} over the recent window`,
      ),
    );
  }
}

function coverageFinding(a: RingAnalysis, t: Thresholds, version: number | null, out: Finding[]): void {
  const c = a.coverage;
  if (!c.degraded) return;
  const grade: Grade = c.fraction < t.coverageAlarmFraction || c.longestInvalidRun >= t.coverageAlarmAdjacentInvalid ? 'alarm' : 'warning';
  out.push({
    kind: 'coverage_degraded',
    grade,
    chamber: null,
    thermocouple: null,
    likelihood: null,
    runnerUpChamber: null,
    runnerUpLikelihood: null,
    evidence: { validCount: c.validCount, total: c.total, fraction: Math.round(c.fraction * 1000) / 1000, longestInvalidRun: c.longestInvalidRun, reason: c.reason },
    baselineVersion: version,
    message: `only ${c.validCount} of ${c.total} thermocouples are usable (${c.longestInvalidRun} adjacent failed): a chamber can hide behind them`,
    advice: 'restore the failed exhaust thermocouples at the next opportunity; until then treat chamber findings near them with caution',
  });
}

/** Spread of the valid readings without thermocouple index `skip`, °C. */
function spreadWithout(a: RingAnalysis, skip: number): number {
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < a.thermocoupleCount; i++) {
    const d = a.deviationDegC[i];
    if (i === skip || !Number.isFinite(d)) continue;
    if (d < lo) lo = d;
    if (d > hi) hi = d;
  }
  return hi - lo;
}

function spreadFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const a = input.analysis;
  const s = a.spread;
  if (!Number.isFinite(s.spreadDegC) || s.validCount < 2) return;
  const { limitDegC, fromBaseline } = spreadLimitDegC(input.baseline, a.loadFraction, t);
  const excess = s.spreadDegC - limitDegC;
  // The chamber a spread points at: the one furthest from its normal when residuals are known
  // (a hot chamber raises the spread from the top), else the coldest on the ring.
  const mapped = input.baseline ? input.residuals?.chamberDegC ?? null : null;
  let spreadChamber = a.coldestChamber;
  if (mapped) {
    let worst = -1;
    for (let k = 0; k < mapped.length; k++) if (Number.isFinite(mapped[k]) && (worst < 0 || Math.abs(mapped[k]) > Math.abs(mapped[worst]))) worst = k;
    if (worst >= 0) spreadChamber = worst + 1;
  }
  if (excess > 0) {
    const grade: Grade = excess >= t.spreadCriticalExcessDegC ? 'critical' : excess >= t.spreadAlarmExcessDegC ? 'alarm' : 'warning';
    // The sensor that departs alone (residuals.lone), when it is the hottest or the coldest
    // probe and the spread without it is inside the limit, is the spread's whole cause.
    const lone = input.baseline ? input.residuals?.lone ?? null : null;
    const loneCause = lone !== null && (lone.thermocouple === s.hottestThermocouple || lone.thermocouple === s.coldestThermocouple) && spreadWithout(a, lone.thermocouple - 1) <= limitDegC;
    // With residuals against a baseline, a probe is blamed only on its own departure (above);
    // without them, when the spread without the coldest probe is inside the limit and the two
    // coldest are not neighbours (the classic reading of a spread).
    const tcSuspect = loneCause || (!mapped && !s.coldestAdjacent && Number.isFinite(s.spreadExcl1DegC) && s.spreadExcl1DegC <= limitDegC);
    const cold = loneCause ? lone!.thermocouple : s.coldestThermocouple;
    const evidence = {
      spreadDegC: r1(s.spreadDegC),
      spreadExcl1DegC: r1(s.spreadExcl1DegC),
      spreadExcl2DegC: r1(s.spreadExcl2DegC),
      limitDegC: r1(limitDegC),
      limitFromBaseline: fromBaseline,
      coldestThermocouple: s.coldestThermocouple,
      hottestThermocouple: s.hottestThermocouple,
      suspectThermocouple: tcSuspect ? cold : null,
      secondColdestThermocouple: s.secondColdestThermocouple,
      coldestAdjacent: s.coldestAdjacent,
      loadFraction: r3(a.loadFraction),
    };
    const chamber = tcSuspect ? null : spreadChamber;
    out.push({
      kind: 'spread_high',
      grade: tcSuspect ? 'notice' : grade,
      chamber,
      thermocouple: tcSuspect ? cold : null,
      likelihood: null,
      runnerUpChamber: null,
      runnerUpLikelihood: null,
      evidence,
      baselineVersion: fromBaseline ? version : null,
      message: tcSuspect
        ? `exhaust spread ${differenceText(s.spreadDegC, unit)} is over the limit ${differenceText(limitDegC, unit)} only because of thermocouple ${cold}`
        : `exhaust spread ${differenceText(s.spreadDegC, unit)} is over the limit ${differenceText(limitDegC, unit)}`,
      advice: tcSuspect
        ? `check thermocouple ${cold} and its wiring at the next opportunity`
        : chamber !== null
          ? `compare with the unit's own exhaust spread protection; inspect chamber ${chamber} combustion at the next opportunity`
          : "compare with the unit's own exhaust spread protection readings",
    });
    if (tcSuspect && cold !== null && !loneCause) {
      out.push(tcFinding(cold, 'notice', 'isolated_outlier', { spreadDegC: r1(s.spreadDegC), spreadExcl1DegC: r1(s.spreadExcl1DegC), limitDegC: r1(limitDegC) }, version, `thermocouple ${cold} alone makes the spread high`));
    }
  }
  const prev = input.history?.previousSteadySpreadDegC;
  if (input.steady && typeof prev === 'number' && Number.isFinite(prev)) {
    const jump = s.spreadDegC - prev;
    if (Math.abs(jump) >= t.spreadJumpWarningDegC) {
      out.push({
        kind: 'spread_jump',
        grade: Math.abs(jump) >= t.spreadJumpAlarmDegC ? 'alarm' : 'warning',
        chamber: spreadChamber,
        thermocouple: null,
        likelihood: null,
        runnerUpChamber: null,
        runnerUpLikelihood: null,
        evidence: { spreadDegC: r1(s.spreadDegC), previousSpreadDegC: r1(prev), jumpDegC: r1(jump) },
        baselineVersion: version,
        message: `exhaust spread changed by ${differenceText(jump, unit)} between consecutive steady rings`,
        advice: 'look at the chamber and thermocouple findings raised with it; check the ring plot for a new cold or hot plume',
      });
    }
  }
}

function chamberFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const a = input.analysis;
  const n = a.chamberCount;
  const resid = chamberScratch(0, n);
  const scale = chamberScratch(1, n);
  let usedBaseline = false;
  const mapped = input.baseline ? input.residuals?.chamberDegC ?? null : null;
  for (let k = 0; k < n; k++) {
    const dev = a.chamberDeviationDegC[k];
    const b = input.baseline && input.baseline.chambers[k] && baselineMedianScaleInto(input.baseline.chambers[k], a.loadFraction, chamberBaseline) ? chamberBaseline : null;
    if (b) usedBaseline = true;
    resid[k] = mapped ? (Number.isFinite(dev) ? mapped[k] : NaN) : b ? dev - b.median : dev;
    scale[k] = b ? b.scale : 0;
  }
  if (mapped) usedBaseline = true;
  const cm = removeCommonModeInto(resid, n, chamberScratch(2, n), chamberScratch(3, n));
  const r = cm.residualsDegC;
  const factor = usedBaseline ? 1 : t.noBaselineChamberFactor;
  const pitch = 360 / n;
  const attr: ChamberAttribution = { chamber: 0, likelihood: NaN, runnerUpChamber: null, runnerUpLikelihood: NaN };
  for (let k = 0; k < n; k++) {
    const v = r[k];
    if (!Number.isFinite(v)) continue;
    // With mapped residuals, their own uncertainty: how well the map fits the departures, not
    // the ring (whose built-in asymmetry the plume kernel fits less well).
    const u = mapped && input.residuals?.chamberUncertaintyDegC ? input.residuals.chamberUncertaintyDegC[k] : a.chamberUncertaintyDegC[k];
    const sigma = Math.max(Number.isFinite(u) ? u : 0, scale[k]);
    if (Math.abs(v) < t.chamberMinZ * sigma) continue;
    const cold = v < 0;
    const mag = Math.abs(v);
    const [w, al, cr] = cold
      ? [t.chamberColdWarningDegC, t.chamberColdAlarmDegC, t.chamberColdCriticalDegC]
      : [t.chamberHotWarningDegC, t.chamberHotAlarmDegC, t.chamberHotCriticalDegC];
    if (mag < (usedBaseline ? w : Math.max(w * factor, t.chamberNoBaselineWarningDegC))) continue;
    // Only the deepest chamber of a plume is reported: skip k when a neighbour is deeper in the same sense.
    const l = (k - 1 + n) % n;
    const rr = (k + 1) % n;
    if ((cold && (r[l] < v || r[rr] < v)) || (!cold && (r[l] > v || r[rr] > v))) continue;
    const grade: Grade = mag >= cr * factor ? 'critical' : mag >= al * factor ? 'alarm' : 'warning';
    attributeChamber(r, k, pitch, t.swirlUncertaintyDeg, attr);
    const ch = k + 1;
    out.push({
      kind: cold ? 'chamber_cold' : 'chamber_hot',
      grade,
      chamber: ch,
      thermocouple: null,
      likelihood: Math.round(attr.likelihood * 1000) / 1000,
      runnerUpChamber: attr.runnerUpChamber,
      runnerUpLikelihood: Math.round(attr.runnerUpLikelihood * 1000) / 1000,
      evidence: {
        residualDegC: r1(v),
        chamberDeviationDegC: r1(a.chamberDeviationDegC[k]),
        uncertaintyDegC: r1(u),
        baselineScaleDegC: usedBaseline ? r1(scale[k]) : null,
        commonModeDegC: r1(cm.commonModeDegC),
        swirlDeg: r1(a.swirlDeg),
        loadFraction: r3(a.loadFraction),
        validThermocouples: a.coverage.validCount,
      },
      baselineVersion: usedBaseline ? version : null,
      message: `chamber ${ch} runs ${differenceText(mag, unit)} ${cold ? 'colder' : 'hotter'} than its normal at this load`,
      advice: chamberAdvice(ch, cold, grade),
    });
  }
}

/**
 * Working arrays of chamberFindings, kept between calls (findings run on every ring in
 * service): four per chamber count, none of them part of what a finding keeps.
 */
const chamberScratchByN = new Map<number, Float64Array[]>();
/** One chamber's baseline median and scale at the ring's load, read before the next chamber's. */
const chamberBaseline = { median: NaN, scale: NaN };
function chamberScratch(which: number, n: number): Float64Array {
  let set = chamberScratchByN.get(n);
  if (!set) chamberScratchByN.set(n, (set = [new Float64Array(n), new Float64Array(n), new Float64Array(n), new Float64Array(n)]));
  return set[which];
}

/**
 * drift.ts removeCommonMode of the first n values into `out`, with `sorted` as room for the
 * sort: the same common mode (the median of the finite values) and the same residuals.
 */
function removeCommonModeInto(values: Float64Array, n: number, sorted: Float64Array, out: Float64Array): { commonModeDegC: number; residualsDegC: Float64Array } {
  let nf = 0;
  for (let i = 0; i < n; i++) if (Number.isFinite(values[i])) sorted[nf++] = values[i];
  sortPrefixInPlace(sorted, nf);
  const cm = medianOfSorted(sorted, nf);
  const finiteCm = Number.isFinite(cm);
  for (let i = 0; i < n; i++) {
    const v = values[i];
    out[i] = finiteCm && Number.isFinite(v) ? v - cm : NaN;
  }
  return { commonModeDegC: cm, residualsDegC: out };
}

function chamberAdvice(ch: number, cold: boolean, grade: Grade): string {
  if (cold && gradeRank(grade) >= gradeRank('alarm'))
    return `check chamber ${ch} flame and crossfire against the unit's own protection readings now; borescope chamber ${ch} liner and transition piece at the next outage`;
  if (cold) return `inspect chamber ${ch} fuel nozzle at the next outage`;
  return `inspect chamber ${ch} fuel nozzle tip for erosion or over-fuelling at the next outage`;
}

/** A drift state's rate when it is significant, else 0, °C per 30 days. */
function significantRate(d: ChamberDriftInput | null | undefined): number {
  return d && d.rate && d.rate.significant ? d.rate.per30DaysDegC : 0;
}

/**
 * The thermocouple drifting alone among the drift states, at a significant rate of at least
 * `minRate`. The states change once a night while findings run on every ring, so the answer is
 * kept per set of states, level and ring geometry.
 */
const loneDriftSeen = new WeakMap<object, Map<number, { left: ArrayLike<number>; lone: { index: number; value: number } | null }>>();
function loneDrift(
  sensors: readonly (ChamberDriftInput | null | undefined)[],
  share: { left: ArrayLike<number>; right: ArrayLike<number> },
  minRate: number,
): { index: number; value: number } | null {
  let byLevel = loneDriftSeen.get(sensors);
  if (!byLevel) loneDriftSeen.set(sensors, (byLevel = new Map()));
  const seen = byLevel.get(minRate);
  if (seen && seen.left === share.left) return seen.lone;
  const m = sensors.length;
  const rates = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    const d = sensors[i];
    rates[i] = d && d.rate ? d.rate.per30DaysDegC : NaN;
  }
  let lone = loneThermocouple(rates, m, share.left, share.right, minRate);
  if (lone && !sensors[lone.index]?.rate?.significant) lone = null;
  byLevel.set(minRate, { left: share.left, lone });
  return lone;
}

function driftFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const chambers = input.drift?.chambers ?? [];
  const sensors = input.drift?.thermocouples ?? [];
  // A thermocouple drifting alone (its neighbours hold) explains the chamber drift the map makes of it.
  const share = input.plumeShare;
  const m = sensors.length;
  const lone = share && m >= 3 ? loneDrift(sensors, share, t.driftWarningDegCPer30Days) : null;
  const explained: number[] = [];
  for (let k = 0; k < chambers.length; k++) {
    const d = chambers[k];
    if (!d) continue;
    const rate = d.rate;
    const mag = Math.abs(significantRate(d));
    let grade: Grade | null = null;
    if (mag >= t.driftAlarmDegCPer30Days) grade = 'alarm';
    else if (mag >= t.driftWarningDegCPer30Days) grade = 'warning';
    // A CUSUM signal alone (no significant rate at the warning level) is shown with the trend, not raised.
    if (!grade || !rate) continue;
    // One plume drifting shows on the chambers either side too: only the strongest is reported.
    const n = chambers.length;
    const sign = Math.sign(rate.per30DaysDegC);
    const l = significantRate(chambers[(k - 1 + n) % n]) * sign;
    const r = significantRate(chambers[(k + 1) % n]) * sign;
    if (n > 1 && (l > mag || r > mag)) continue;
    if (lone) {
      explained.push(k + 1);
      continue;
    }
    const c = d.cusum;
    const cusumSide = c ? (c.lower > c.h ? 'down' : c.upper > c.h ? 'up' : null) : null;
    const cooling = rate.per30DaysDegC < 0;
    const ch = k + 1;
    out.push({
      kind: 'chamber_drift',
      grade,
      chamber: ch,
      thermocouple: null,
      likelihood: null,
      runnerUpChamber: null,
      runnerUpLikelihood: null,
      evidence: {
        ratePer30DaysDegC: r1(rate.per30DaysDegC),
        rateLowPer30DaysDegC: r1(rate.per30DaysInterval[0]),
        rateHighPer30DaysDegC: r1(rate.per30DaysInterval[1]),
        ratePer1000FiredHoursDegC: rate.per1000FiredHoursDegC !== null ? r1(rate.per1000FiredHoursDegC) : null,
        cusumUpper: c ? r1(c.upper) : null,
        cusumLower: c ? r1(c.lower) : null,
        cusumSignal: cusumSide,
      },
      baselineVersion: version,
      message: `chamber ${ch} is ${cooling ? 'cooling' : 'warming'} against its baseline at ${differenceText(rate.per30DaysDegC, unit)} per 30 days`,
      advice: cooling ? `inspect chamber ${ch} fuel nozzle at the next outage` : `inspect chamber ${ch} fuel nozzle tip for erosion or over-fuelling at the next outage`,
    });
  }
  if (lone) {
    const tc = lone.index + 1;
    const rate = sensors[lone.index]!.rate!;
    const [li, ri] = [(lone.index - 1 + m) % m, (lone.index + 1) % m];
    out.push(
      tcFinding(
        tc,
        'warning',
        'drifting_alone',
        {
          ratePer30DaysDegC: r1(rate.per30DaysDegC),
          rateLowPer30DaysDegC: r1(rate.per30DaysInterval[0]),
          rateHighPer30DaysDegC: r1(rate.per30DaysInterval[1]),
          leftNeighbourRatePer30DaysDegC: r1(sensors[li]?.rate?.per30DaysDegC ?? NaN),
          rightNeighbourRatePer30DaysDegC: r1(sensors[ri]?.rate?.per30DaysDegC ?? NaN),
          chamberDriftExplained: explained.join(',') || null,
        },
        version,
        `thermocouple ${tc} is drifting ${rate.per30DaysDegC < 0 ? 'down' : 'up'} against its normal at ${differenceText(rate.per30DaysDegC, unit)} per 30 days while its neighbours hold${explained.length ? `; the drift of chamber ${explained.join(', ')} is this sensor's` : ''}`,
      ),
    );
  }
}
