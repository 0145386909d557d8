/**
 * What of a unit is not judged yet, and why, in sentences a person can act on: no ring stored
 * or analysed yet, no baseline (and when the automatic first fit falls due in ring time, or
 * the requested fit it waits for), a latest ring that is not steady, a spread limit that is the
 * default because no baseline bin covers this load, drift not yet computed. The status,
 * chamber and thermocouple replies and the pre-outage review all say it with these words, so
 * that a null or a dash is never left unexplained.
 */

import { baselinePeriodAt, baselineStanding, type PeriodEvent } from './baseline-periods.ts';

export type NotJudgedPart = 'analysis' | 'baseline' | 'residuals' | 'limit' | 'drift';

export interface NotJudged {
  part: NotJudgedPart;
  reason: string;
}

export interface JudgementInput {
  unitId: string;
  ringsStored: number;
  ringsAnalysed: number;
  /** Analysis is complete up to this ring time (ms), or null. */
  watermarkMs: number | null;
  /** The latest analysed ring, or null before the first. */
  latest: { steady: boolean; limitFromBaseline: boolean; baselineVersion: number | null; loadFraction: number | null } | null;
  /** The newest baseline version of the unit, or null when it has none. */
  baselineVersion: number | null;
  /** Ring time of the unit's first steady analysed ring (ms), or null. */
  firstSteadyMs: number | null;
  /** Days of steady data after which the first baseline is fitted automatically. */
  baselineAutoDays: number;
  /** A requested fit still waiting for analysis to pass its window, or null. */
  pendingRequest: { fromMs: number; toMs: number } | null;
  /** Drift states computed against the newest baseline; omitted where drift is not shown. */
  driftStates?: number;
  /** When the drift job runs (a cron pattern, UTC), for the drift reason. */
  driftSchedule?: string | null;
  /** Start of the reference window of the baseline in force at the watermark (ms), or null. */
  baselineInForceFromMs?: number | null;
  /** Maintenance starting a new baseline period, up to the watermark (core/baseline-periods.ts). */
  periods?: readonly PeriodEvent[];
}

export interface Judgement {
  notJudged: NotJudged[];
  /** Ring time at which the automatic first baseline falls due, when the unit has none. */
  baselineDueMs: number | null;
  /**
   * Work on the machine since the baseline in force was learnt: the rings are judged on the
   * baseline from before the work until the new one is fitted; null when none.
   */
  baselineCaution: string | null;
}

const DAY_MS = 86_400_000;
const iso = (ms: number) => new Date(ms).toISOString().replace('.000Z', 'Z');
const fitOnRequest = (unitId: string) => `POST /v1/units/${unitId}/baselines with {"from","to"} over a window of normal steady running`;

export function judgement(i: JudgementInput): Judgement {
  const out: NotJudged[] = [];
  let baselineDueMs: number | null = null;
  if (i.latest === null && i.ringsStored === 0) {
    out.push({ part: 'analysis', reason: `No ring has been stored for this unit yet; send rings to POST /v1/units/${i.unitId}/rings.` });
  } else if (i.latest === null) {
    out.push({ part: 'analysis', reason: `No ring has been analysed yet: ${i.ringsStored - i.ringsAnalysed} stored rings wait for the analysis worker.` });
  }
  const reached = i.watermarkMs === null ? 'analysis has not started' : `analysis has reached ${iso(i.watermarkMs)}`;
  if (i.baselineVersion === null) {
    const then = 'Until then chamber and thermocouple residuals, drift and the trends are not judged, and the spread limit is the default one.';
    if (i.pendingRequest) {
      out.push({
        part: 'baseline',
        reason: `No baseline yet: the fit asked for over ${iso(i.pendingRequest.fromMs)} to ${iso(i.pendingRequest.toMs)} is made once analysis passes ${iso(i.pendingRequest.toMs)} (${reached}). ${then}`,
      });
    } else if (i.firstSteadyMs !== null) {
      baselineDueMs = i.firstSteadyMs + i.baselineAutoDays * DAY_MS;
      out.push({
        part: 'baseline',
        reason: `No baseline yet: the first is fitted automatically when analysis reaches ${iso(baselineDueMs)} in ring time, ${i.baselineAutoDays} days after the first steady ring (${iso(i.firstSteadyMs)}); ${reached}. To fit one sooner: ${fitOnRequest(i.unitId)}. ${then}`,
      });
    } else {
      out.push({
        part: 'baseline',
        reason: `No baseline yet, and no steady ring analysed: the first baseline is fitted automatically ${i.baselineAutoDays} days of ring time after the first steady ring, or on ${fitOnRequest(i.unitId)}. ${then}`,
      });
    }
  } else if (i.latest && i.latest.baselineVersion === null) {
    out.push({ part: 'residuals', reason: `The latest ring was analysed without a baseline; baseline version ${i.baselineVersion} judges the rings analysed after it was fitted.` });
  }
  if (i.latest && !i.latest.steady && (i.baselineVersion !== null || i.latest.baselineVersion !== null)) {
    out.push({ part: 'residuals', reason: 'The latest ring is not steady (load or temperatures still moving, or a start or shutdown): residuals are judged on steady rings only; the figures shown are the latest steady ones.' });
  }
  if (i.latest && i.latest.baselineVersion !== null && !i.latest.limitFromBaseline) {
    const at = i.latest.loadFraction === null ? '' : ` (${Math.round(i.latest.loadFraction * 100)} % corrected load)`;
    out.push({ part: 'limit', reason: `Baseline version ${i.latest.baselineVersion} has too few steady rings at this load${at} to set a limit there: the spread limit is the default one.` });
  }
  if (i.driftStates === 0 && i.baselineVersion !== null) {
    out.push({ part: 'drift', reason: `No drift computed yet against baseline version ${i.baselineVersion}: drift is brought up to date from the daily residuals as each ring-time day after the baseline ends (a later ring ends a day; for a unit whose data stopped, the nightly job${i.driftSchedule ? ` at ${i.driftSchedule} UTC` : ''} does once the day has ended on the clock).` });
  }
  let baselineCaution: string | null = null;
  if (i.periods?.length && i.baselineInForceFromMs !== undefined && i.baselineInForceFromMs !== null && i.watermarkMs !== null) {
    const st = baselineStanding(baselinePeriodAt(i.periods, i.watermarkMs), i.baselineInForceFromMs, i.baselineAutoDays);
    if (st.caution) {
      baselineCaution = st.caution;
      out.push({ part: 'baseline', reason: `${st.caution} Drift of the chambers concerned restarts after the work.` });
    }
  }
  return { notJudged: out, baselineDueMs, baselineCaution };
}
