/**
 * An alert as stored (AlertRow, times as Date) and as the API and webhooks send it (AlertJson,
 * RFC 3339 times, with its history), the actions a change can be, and the row mapping. No
 * statement here; the repository files beside it use these.
 */
import type { Grade } from '../core/findings.ts';
import type pg from 'pg';
import type { AlertKind } from './config.ts';

export type Queryable = pg.Pool | pg.PoolClient;

export const ALERT_ACTIONS = ['raised', 'reactivated', 'escalated', 'deescalated', 'returned_to_normal', 'acknowledged', 'shelved', 'unshelved', 'shelf_expired', 'withdrawn'] as const;

export type AlertAction = (typeof ALERT_ACTIONS)[number];

export const ALERT_STATES = ['active', 'cleared', 'shelved', 'open', 'all'] as const;

export type AlertStateFilter = (typeof ALERT_STATES)[number];

/** An alert as stored, times as Date. Chamber and thermocouple are numbered from 1. */
export interface AlertRow {
  id: string;
  unitId: string;
  kind: AlertKind;
  conditionKey: string;
  grade: Grade;
  chamber: number | null;
  thermocouple: number | null;
  active: boolean;
  acknowledged: boolean;
  ackedAt: Date | null;
  ackedBy: string | null;
  ackComment: string | null;
  shelvedUntil: Date | null;
  shelvedAt: Date | null;
  shelvedBy: string | null;
  shelveReason: string | null;
  raisedAt: Date;
  lastChangedAt: Date;
  clearedAt: Date | null;
  closedAt: Date | null;
  message: string;
  advice: string;
  evidence: Record<string, unknown>;
  likelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
  baselineVersion: number | null;
  lastSeenAt: Date | null;
  absentSince: Date | null;
  pendingGrade: Grade | null;
  pendingGradeSince: Date | null;
  /** Raised while analysing history (a backlog, an import, a re-analysis). */
  foundInHistory: boolean;
  /** A history alert's announcement to webhooks is done (or was not due): its changes are pushed from then on. */
  historyAnnounced: boolean;
}

/** A row not yet inserted: the same fields with an empty id. */
export type AlertDraft = AlertRow;

export interface AlertHistoryJson {
  /** Increases with every change anywhere; orders the changes of one alert. */
  sequence: string;
  at: string;
  recordedAt: string;
  action: AlertAction;
  grade: Grade;
  fromGrade: Grade | null;
  by: string | null;
  comment: string | null;
  details: Record<string, unknown>;
}

/** The alert as API.md shows it. */
export interface AlertJson {
  id: string;
  unitId: string;
  kind: AlertKind;
  grade: Grade;
  chamber: number | null;
  thermocouple: number | null;
  active: boolean;
  acknowledged: boolean;
  acknowledgedAt: string | null;
  acknowledgedBy: string | null;
  shelvedUntil: string | null;
  shelvedBy: string | null;
  shelveReason: string | null;
  raisedAt: string;
  lastChangedAt: string;
  clearedAt: string | null;
  closedAt: string | null;
  message: string;
  advice: string;
  evidence: Record<string, unknown>;
  likelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
  baselineVersion: number | null;
  foundInHistory: boolean;
  history?: AlertHistoryJson[];
}

/** What a state change did, as returned to the worker and written to history. */
export interface AlertChange {
  alertId: string;
  unitId: string;
  kind: AlertKind;
  chamber: number | null;
  thermocouple: number | null;
  action: AlertAction;
  grade: Grade;
  fromGrade: Grade | null;
  at: Date;
  historyId: string;
}

export interface ChangeInput {
  action: AlertAction;
  at: Date;
  fromGrade?: Grade | null;
  by?: string | null;
  comment?: string | null;
  details?: Record<string, unknown>;
  /** false: write no outbox rows (a shelved alert is not annunciated). */
  notify?: boolean;
}

export const iso = (d: Date | null): string | null => (d ? d.toISOString() : null);

export const num = (v: unknown): number | null => (v === null || v === undefined ? null : Number(v));

export const date = (v: unknown): Date | null => (v === null || v === undefined ? null : v instanceof Date ? v : new Date(String(v)));

export const ALERT_COLUMNS = `id, unit_id, kind, condition_key, grade, chamber, thermocouple, active, acknowledged, acked_at, acked_by, ack_comment,
  shelved_until, shelved_at, shelved_by, shelve_reason, raised_at, last_changed_at, cleared_at, closed_at, message, advice, evidence,
  likelihood, runner_up_chamber, runner_up_likelihood, baseline_version, last_seen_at, absent_since, pending_grade, pending_grade_since,
  found_in_history, history_announced`;

/** An alert row as PostgreSQL returns it (snake_case columns) to the AlertRow shape. */
export function alertFromDb(r: Record<string, unknown>): AlertRow {
  return {
    id: String(r.id),
    unitId: String(r.unit_id),
    kind: r.kind as AlertKind,
    conditionKey: String(r.condition_key),
    grade: r.grade as Grade,
    chamber: num(r.chamber),
    thermocouple: num(r.thermocouple),
    active: Boolean(r.active),
    acknowledged: Boolean(r.acknowledged),
    ackedAt: date(r.acked_at),
    ackedBy: (r.acked_by as string | null) ?? null,
    ackComment: (r.ack_comment as string | null) ?? null,
    shelvedUntil: date(r.shelved_until),
    shelvedAt: date(r.shelved_at),
    shelvedBy: (r.shelved_by as string | null) ?? null,
    shelveReason: (r.shelve_reason as string | null) ?? null,
    raisedAt: date(r.raised_at) as Date,
    lastChangedAt: date(r.last_changed_at) as Date,
    clearedAt: date(r.cleared_at),
    closedAt: date(r.closed_at),
    message: String(r.message),
    advice: String(r.advice),
    evidence: (r.evidence as Record<string, unknown>) ?? {},
    likelihood: num(r.likelihood),
    runnerUpChamber: num(r.runner_up_chamber),
    runnerUpLikelihood: num(r.runner_up_likelihood),
    baselineVersion: num(r.baseline_version),
    lastSeenAt: date(r.last_seen_at),
    absentSince: date(r.absent_since),
    pendingGrade: (r.pending_grade as Grade | null) ?? null,
    pendingGradeSince: date(r.pending_grade_since),
    foundInHistory: Boolean(r.found_in_history),
    historyAnnounced: Boolean(r.history_announced),
  };
}

export function historyFromDb(r: Record<string, unknown>): AlertHistoryJson {
  return {
    sequence: String(r.id),
    at: iso(date(r.at)) as string,
    recordedAt: iso(date(r.recorded_at)) as string,
    action: r.action as AlertAction,
    grade: r.grade as Grade,
    fromGrade: (r.from_grade as Grade | null) ?? null,
    by: (r.by as string | null) ?? null,
    comment: (r.comment as string | null) ?? null,
    details: (r.details as Record<string, unknown>) ?? {},
  };
}

export function toAlertJson(a: AlertRow, history?: AlertHistoryJson[]): AlertJson {
  return {
    id: a.id,
    unitId: a.unitId,
    kind: a.kind,
    grade: a.grade,
    chamber: a.chamber,
    thermocouple: a.thermocouple,
    active: a.active,
    acknowledged: a.acknowledged,
    acknowledgedAt: iso(a.ackedAt),
    acknowledgedBy: a.ackedBy,
    shelvedUntil: iso(a.shelvedUntil),
    shelvedBy: a.shelvedBy,
    shelveReason: a.shelveReason,
    raisedAt: iso(a.raisedAt) as string,
    lastChangedAt: iso(a.lastChangedAt) as string,
    clearedAt: iso(a.clearedAt),
    closedAt: iso(a.closedAt),
    message: a.message,
    advice: a.advice,
    evidence: a.evidence,
    likelihood: a.likelihood,
    runnerUpChamber: a.runnerUpChamber,
    runnerUpLikelihood: a.runnerUpLikelihood,
    baselineVersion: a.baselineVersion,
    foundInHistory: a.foundInHistory,
    ...(history ? { history } : {}),
  };
}

/** True while a shelf hides the alert at wall-clock instant `now`. */
export function isShelved(a: Pick<AlertRow, 'shelvedUntil'>, now: Date): boolean {
  return a.shelvedUntil !== null && a.shelvedUntil.getTime() > now.getTime();
}
