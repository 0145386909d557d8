/**
 * The start counters of a unit, and when each counts: a fired start when a start's flame was
 * established, a failed start for the failed outcomes, a trip when a run ends at speed, and
 * fired time between two rings while the unit is fired (at most `firedGapMaxS` across a gap).
 */
import { FAILED_START_OUTCOMES, type StartCounters, type StartDetectorState, type StartOutcome } from './starts.ts';

/** Adds the fired time between two rings dtS apart. */
export function countFiredTime(counters: StartCounters, dtS: number, firedGapMaxS: number): void {
  counters.firedSeconds += Math.min(dtS, firedGapMaxS);
}

/** Counts a run that ended in a trip. */
export function countTrip(counters: StartCounters): void {
  counters.trips++;
}

/** Counts a start that has closed: fired when its flame was established, failed by its outcome. */
export function countClosedStart(counters: StartCounters, flameEstablished: boolean, outcome: StartOutcome): void {
  if (flameEstablished) counters.firedStarts++;
  if (FAILED_START_OUTCOMES.includes(outcome)) counters.failedStarts++;
}

/** Counters of a detector state, with fired hours. */
export function startCountersOf(state: StartDetectorState): StartCounters & { firedHours: number } {
  return { ...state.counters, firedHours: Math.round((state.counters.firedSeconds / 3600) * 100) / 100 };
}
