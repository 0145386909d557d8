/**
 * Inspection outcomes, counted: how many calls to inspect (alerts naming a chamber or a
 * thermocouple) were confirmed, not found, not inspected or are still open, per kind, and the
 * lead time a confirmed call gave: from the first alert on that chamber or thermocouple to the
 * inspection that confirmed it. Plain rows in, plain counts out; no clock (times are
 * parameters, as ms since the epoch).
 */
import { median } from './stats.ts';

export type OutcomeValue = 'confirmed' | 'not_found' | 'not_inspected';

/** The alert kinds that are a call to inspect one chamber or one thermocouple. */
export const CALL_KINDS = ['chamber_cold', 'chamber_hot', 'chamber_drift', 'chamber_unlit', 'thermocouple_fault'] as const;
export type CallKind = (typeof CALL_KINDS)[number];

export function isCallKind(kind: string): kind is CallKind {
  return (CALL_KINDS as readonly string[]).includes(kind);
}

export interface Call {
  alertId: string;
  unitId: string;
  kind: string;
  /** Numbered from 1; one of chamber and thermocouple is set. */
  chamber: number | null;
  thermocouple: number | null;
  raisedAtMs: number;
  outcome: OutcomeValue | null;
  /** When the chamber or probe was looked at (the outage); null when not inspected. */
  inspectedAtMs: number | null;
}

export interface KindCounts {
  kind: string;
  calls: number;
  confirmed: number;
  notFound: number;
  notInspected: number;
  /** No outcome recorded yet. */
  open: number;
  /** confirmed / (confirmed + notFound); null before any inspection. */
  precision: number | null;
  /** Over confirmed calls: days from the first alert on the subject to the inspection. */
  leadTimeDays: { count: number; median: number | null; min: number | null; max: number | null };
}

const subjectOf = (c: Call) => `${c.unitId}/${c.chamber !== null ? `c${c.chamber}` : `t${c.thermocouple}`}`;

/**
 * Start of each call's episode, ms: the earliest raise among the calls on the same unit and
 * subject (chamber n or thermocouple n, any kind) raised no later than it and after the last
 * inspection of that subject before it. A chamber that drifted for weeks before it went cold
 * gives the lead time from the drift alert.
 */
export function firstAlertMs(calls: readonly Call[]): Map<string, number> {
  const bySubject = new Map<string, Call[]>();
  for (const c of calls) {
    const k = subjectOf(c);
    const list = bySubject.get(k);
    if (list) list.push(c);
    else bySubject.set(k, [c]);
  }
  const out = new Map<string, number>();
  for (const list of bySubject.values()) {
    const inspections = list.filter((c) => c.inspectedAtMs !== null && c.outcome !== 'not_inspected').map((c) => c.inspectedAtMs!);
    for (const c of list) {
      const lastInspection = Math.max(-Infinity, ...inspections.filter((t) => t < c.raisedAtMs));
      let first = c.raisedAtMs;
      for (const o of list) if (o.raisedAtMs <= c.raisedAtMs && o.raisedAtMs > lastInspection && o.raisedAtMs < first) first = o.raisedAtMs;
      out.set(c.alertId, first);
    }
  }
  return out;
}

const DAY_MS = 86_400_000;

/**
 * Counts per kind, in CALL_KINDS order, of the calls given; `first` is firstAlertMs over every
 * call of the units concerned (so a subset keeps the episodes of the whole).
 */
export function countOutcomes(calls: readonly Call[], first: ReadonlyMap<string, number> = firstAlertMs(calls)): KindCounts[] {
  return CALL_KINDS.map((kind) => {
    const of = calls.filter((c) => c.kind === kind);
    const n = (o: OutcomeValue | null) => of.filter((c) => c.outcome === o).length;
    const confirmed = n('confirmed');
    const notFound = n('not_found');
    const leads = of
      .filter((c) => c.outcome === 'confirmed' && c.inspectedAtMs !== null)
      .map((c) => (c.inspectedAtMs! - (first.get(c.alertId) ?? c.raisedAtMs)) / DAY_MS);
    return {
      kind,
      calls: of.length,
      confirmed,
      notFound,
      notInspected: n('not_inspected'),
      open: n(null),
      precision: confirmed + notFound > 0 ? confirmed / (confirmed + notFound) : null,
      leadTimeDays: { count: leads.length, median: leads.length ? median(leads) : null, min: leads.length ? Math.min(...leads) : null, max: leads.length ? Math.max(...leads) : null },
    };
  });
}
