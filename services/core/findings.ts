/**
 * Findings, their words: what a finding is (kind, grade, the chamber with the runner-up chamber
 * and its likelihood, or the thermocouple, the evidence numbers, the baseline version used and
 * a plain next step), every limit the rules judge by (`Thresholds`, nothing hidden in the code),
 * what the rules are given (`FindingInput`), the spread limit at a load, and the caution every
 * finding carries. The rules are in evaluate-findings.ts and the *-findings.ts files beside it.
 */
import { baselineAt, type UnitBaseline } from './baseline.ts';
import type { CusumState, DriftRate } from './drift.ts';
import type { BaselineResiduals, RingAnalysis } from './ring.ts';
import type { WindowVerdict } from './validity.ts';

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

/** Said wherever findings are shown, as the README says it first: Cansight advises, it does not protect. */
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
  residuals?: Pick<BaselineResiduals, 'thermocoupleDegC' | 'chamberDegC' | 'chamberUncertaintyDegC' | 'lone'> & Partial<Pick<BaselineResiduals, 'chamberCommonModeDegC'>> | null;
  /**
   * The plume kernel's response at each thermocouple's left and right neighbour, relative to
   * its peak, for the narrowest plume allowed for (UnitContext.loneShareLeft / loneShareRight): how much of a chamber's plume peaking
   * on a thermocouple its neighbours must see. With it, a departure that stays on one
   * thermocouple is reported as that sensor's, not as a chamber's.
   */
  plumeShare?: {
    left: ArrayLike<number>;
    right: ArrayLike<number>;
    /**
     * The plume kernel's response of each chamber at each thermocouple at this ring's load
     * (ring.ts plumeResponseAt: M × N row-major), and the share from which a chamber's plume
     * covers a thermocouple (AnalysisOptions.plumeCoverResponse). With them, a thermocouple
     * departing alone explains only the chambers whose plume covers it.
     */
    response?: ArrayLike<number>;
    coverResponse?: number;
  };
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

export function r1(v: number): number | null {
  return Number.isFinite(v) ? Math.round(v * 10) / 10 : null;
}

export function r3(v: number): number | null {
  return Number.isFinite(v) ? Math.round(v * 1000) / 1000 : null;
}
