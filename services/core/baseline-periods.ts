/**
 * Baseline periods from maintenance: fuel nozzles worked on, a combustion inspection or
 * combustor tuning make the machine after the work a new normal. The chambers concerned (or
 * the whole unit) start a new baseline period at the event's ring time; until a baseline is
 * fitted from that period, rings are judged on the old baseline with a caution, not as drift.
 * Pure: events and times (ms since 1970) in, the period and the standing of a baseline out.
 * (For the analysis and its re-analysis of past events to call; a thermocouple replaced is not
 * a new period, its offset is relearnt instead.)
 */

export const NEW_PERIOD_KINDS = ['nozzles_worked', 'combustion_inspection', 'combustor_tuning'] as const;

export interface PeriodEvent {
  kind: string;
  atMs: number;
  /** Numbered from 1; null: the whole unit. */
  chambers: readonly number[] | null;
}

export interface BaselinePeriod {
  fromMs: number;
  /** Chambers starting a new period (numbered from 1); null: the whole unit. */
  chambers: number[] | null;
  kinds: string[];
}

/**
 * The baseline period in force at tsMs: started by the latest event of a NEW_PERIOD_KINDS kind at
 * or before it; events at the same instant are one period (their chambers joined; any whole-unit
 * event makes it whole-unit). Null when no such event precedes tsMs.
 * Example: nozzles on chamber 4 at t=10, tuning of the whole unit at t=20 → at t=15 the period
 * is {fromMs: 10, chambers: [4]}, at t=25 {fromMs: 20, chambers: null}.
 */
export function baselinePeriodAt(events: readonly PeriodEvent[], tsMs: number): BaselinePeriod | null {
  let from = -Infinity;
  for (const e of events) if ((NEW_PERIOD_KINDS as readonly string[]).includes(e.kind) && e.atMs <= tsMs && e.atMs > from) from = e.atMs;
  if (from === -Infinity) return null;
  const same = events.filter((e) => (NEW_PERIOD_KINDS as readonly string[]).includes(e.kind) && e.atMs === from);
  const whole = same.some((e) => e.chambers === null);
  return { fromMs: from, chambers: whole ? null : [...new Set(same.flatMap((e) => e.chambers ?? []))].sort((a, b) => a - b), kinds: [...new Set(same.map((e) => e.kind))] };
}

export interface BaselineStanding {
  /** current: the baseline was learnt within the period; superseded: it predates the work. */
  state: 'current' | 'superseded';
  /** Ring time from which an automatic fit from the period falls due; null when current. */
  fitDueMs: number | null;
  /** Said with every judgement while superseded; null when current. */
  caution: string | null;
}

/**
 * How a baseline whose reference window starts at baselineFromMs stands in `period`: learnt
 * from the period (its window starts at or after the work) or superseded by it, with the ring
 * time an automatic fit falls due (autoFitDays of data after the work) and the caution.
 * Example: work at day 0, baseline from day −30, 14 auto-fit days → superseded, due at day 14.
 */
export function baselineStanding(period: BaselinePeriod | null, baselineFromMs: number | null, autoFitDays: number): BaselineStanding {
  if (period === null || (baselineFromMs !== null && baselineFromMs >= period.fromMs)) return { state: 'current', fitDueMs: null, caution: null };
  const where = period.chambers === null ? 'the unit' : `chamber${period.chambers.length > 1 ? 's' : ''} ${period.chambers.join(', ')}`;
  const what = period.kinds.map((k) => k.replace(/_/g, ' ')).join(' and ');
  const due = period.fromMs + autoFitDays * 86_400_000;
  return {
    state: 'superseded',
    fitDueMs: due,
    caution: `After the ${what} of ${new Date(period.fromMs).toISOString()}, ${where} ${period.chambers?.length === 1 ? 'is' : 'are'} judged on the baseline from before the work until a new one is fitted (due at ${new Date(due).toISOString()}): a change since the work is the work's, not drift.`,
  };
}

/**
 * The chambers whose drift restarts for work on `chambers` (numbered from 1) of a ring of n: each
 * of them and its two neighbours, since a chamber's plume reaches its neighbours' estimates in
 * the chamber map (a change in one shows, smaller, in the next ones). Null (the whole unit): all.
 * Example: chamber 1 of 10 → [1, 2, 10].
 */
export function chambersReached(chambers: readonly number[] | null, n: number): number[] {
  if (chambers === null) return Array.from({ length: n }, (_, k) => k + 1);
  const out = new Set<number>();
  for (const c of chambers) for (const d of [-1, 0, 1]) out.add((((c - 1 + d) % n) + n) % n + 1);
  return [...out].sort((a, b) => a - b);
}
