/**
 * Alerts and webhooks repository: every query about alerts, their history, the on-delay state
 * of conditions not yet raised, webhook subscriptions, the outbox and the delivery log. Read
 * this file to know every statement the alert life cycle makes.
 *
 * A change of an alert's state goes through `recordChange`, which writes the alert row, its one
 * history row and the outbox rows of the subscriptions that want it, on the caller's client, so
 * all three commit or roll back together. This file decides nothing about when alerts are raised
 * or cleared (services/worker/alerts.ts does); it does own what people's actions (acknowledge,
 * shelve, unshelve) and a shelf's expiry do to a row, since those need no rule.
 */
import { randomUUID } from 'node:crypto';
import type pg from 'pg';
import { ADVISORY_CAUTION, GRADES, gradeRank, type Grade } from '../core/findings.ts';
import type { AlertKind } from './config.ts';
import { withTransaction } from './pool.ts';

export type Queryable = pg.Pool | pg.PoolClient;

export const ALERT_ACTIONS = ['raised', 'reactivated', 'escalated', 'deescalated', 'returned_to_normal', 'acknowledged', 'shelved', 'unshelved', 'shelf_expired'] as const;
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

const iso = (d: Date | null): string | null => (d ? d.toISOString() : null);
const num = (v: unknown): number | null => (v === null || v === undefined ? null : Number(v));
const date = (v: unknown): Date | null => (v === null || v === undefined ? null : v instanceof Date ? v : new Date(String(v)));

const ALERT_COLUMNS = `id, unit_id, kind, condition_key, grade, chamber, thermocouple, active, acknowledged, acked_at, acked_by, ack_comment,
  shelved_until, shelved_at, shelved_by, shelve_reason, raised_at, last_changed_at, cleared_at, closed_at, message, advice, evidence,
  likelihood, runner_up_chamber, runner_up_likelihood, baseline_version, last_seen_at, absent_since, pending_grade, pending_grade_since`;

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
  };
}

function historyFromDb(r: Record<string, unknown>): AlertHistoryJson {
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
    ...(history ? { history } : {}),
  };
}

/** True while a shelf hides the alert at wall-clock instant `now`. */
export function isShelved(a: Pick<AlertRow, 'shelvedUntil'>, now: Date): boolean {
  return a.shelvedUntil !== null && a.shelvedUntil.getTime() > now.getTime();
}

// ---------------------------------------------------------------------------------------------
// Writing a change: alert row + one history row + outbox rows, on the caller's client.

function alertParams(a: AlertRow): unknown[] {
  return [
    a.id, a.unitId, a.kind, a.conditionKey, a.grade, a.chamber, a.thermocouple, a.active, a.acknowledged, a.ackedAt, a.ackedBy, a.ackComment,
    a.shelvedUntil, a.shelvedAt, a.shelvedBy, a.shelveReason, a.raisedAt, a.lastChangedAt, a.clearedAt, a.closedAt, a.message, a.advice,
    JSON.stringify(a.evidence), a.likelihood, a.runnerUpChamber, a.runnerUpLikelihood, a.baselineVersion, a.lastSeenAt, a.absentSince,
    a.pendingGrade, a.pendingGradeSince,
  ];
}

/** Inserts a new alert row (a.id is set here when empty). Fails with 23505 if the condition already has an open alert. */
export async function insertAlert(c: Queryable, a: AlertRow): Promise<AlertRow> {
  if (!a.id) a.id = randomUUID();
  await c.query(
    `INSERT INTO alerts (${ALERT_COLUMNS})
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20, $21, $22, $23, $24, $25, $26, $27, $28, $29, $30, $31)`,
    alertParams(a),
  );
  return a;
}

/** Writes every mutable column of an existing alert row. */
export async function saveAlert(c: Queryable, a: AlertRow): Promise<void> {
  await c.query(
    `UPDATE alerts SET grade = $5, chamber = $6, thermocouple = $7, active = $8, acknowledged = $9, acked_at = $10, acked_by = $11,
       ack_comment = $12, shelved_until = $13, shelved_at = $14, shelved_by = $15, shelve_reason = $16, raised_at = $17,
       last_changed_at = $18, cleared_at = $19, closed_at = $20, message = $21, advice = $22, evidence = $23, likelihood = $24,
       runner_up_chamber = $25, runner_up_likelihood = $26, baseline_version = $27, last_seen_at = $28, absent_since = $29,
       pending_grade = $30, pending_grade_since = $31, updated_at = now()
     WHERE id = $1 AND unit_id = $2 AND kind = $3 AND condition_key = $4`,
    alertParams(a),
  );
}

/** The webhook body of one change. Stored as text in the outbox and signed as stored. */
export function webhookBody(eventId: string, a: AlertRow, change: AlertChange): string {
  return JSON.stringify({
    eventId,
    event: change.action,
    sequence: change.historyId,
    occurredAt: change.at.toISOString(),
    unitId: a.unitId,
    grade: change.grade,
    fromGrade: change.fromGrade,
    alert: toAlertJson(a),
    caution: ADVISORY_CAUTION,
  });
}

/**
 * Records one state change of `a` (already mutated by the caller): inserts the row when
 * `isNew`, else updates it; writes its history row; and, unless `notify` is false, one outbox
 * row per live subscription whose unit list and minimum grade match (the higher of the new and
 * the previous grade, so a receiver that saw a grade also hears that it went down).
 */
export async function recordChange(c: Queryable, a: AlertRow, input: ChangeInput, isNew = false): Promise<AlertChange> {
  if (isNew) await insertAlert(c, a);
  else await saveAlert(c, a);
  const h = await c.query(
    `INSERT INTO alert_history (alert_id, unit_id, at, action, grade, from_grade, by, comment, details)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9) RETURNING id`,
    [a.id, a.unitId, input.at, input.action, a.grade, input.fromGrade ?? null, input.by ?? null, input.comment ?? null, JSON.stringify(input.details ?? {})],
  );
  const change: AlertChange = {
    alertId: a.id,
    unitId: a.unitId,
    kind: a.kind,
    chamber: a.chamber,
    thermocouple: a.thermocouple,
    action: input.action,
    grade: a.grade,
    fromGrade: input.fromGrade ?? null,
    at: input.at,
    historyId: String(h.rows[0].id),
  };
  if (input.notify !== false) {
    const rank = Math.max(gradeRank(a.grade), input.fromGrade ? gradeRank(input.fromGrade) : -1);
    await c.query(
      `INSERT INTO webhook_outbox (webhook_id, alert_id, unit_id, history_id, event, body)
       SELECT id, $1, $2, $3, $4, $5 FROM webhooks
        WHERE deleted_at IS NULL AND array_position($6::text[], min_grade) - 1 <= $7
          AND (unit_ids IS NULL OR $2 = ANY(unit_ids))`,
      [a.id, a.unitId, change.historyId, input.action, webhookBody(randomUUID(), a, change), GRADES, rank],
    );
  }
  return change;
}

// ---------------------------------------------------------------------------------------------
// What the rule engine (services/worker/alerts.ts) reads and keeps between calls.

/** A condition at the raise level, waiting out its on-delay. */
export interface PendingCondition {
  conditionKey: string;
  kind: AlertKind;
  since: Date;
  lastSeen: Date;
  /** Lowest grade seen since `since`. */
  grade: Grade;
  /** The latest finding (a Finding from services/core/findings.ts). */
  finding: Record<string, unknown>;
}

/**
 * Locks the unit's alert state row for the caller's transaction (created on first use) and
 * returns the ring time up to which observations have been applied.
 */
export async function lockAlertUnitState(c: Queryable, unitId: string): Promise<Date | null> {
  const { rows } = await c.query(
    `INSERT INTO alert_unit_state (unit_id) VALUES ($1)
     ON CONFLICT (unit_id) DO UPDATE SET unit_id = excluded.unit_id RETURNING evaluated_to`,
    [unitId],
  );
  return date(rows[0].evaluated_to);
}

export async function setAlertWatermark(c: Queryable, unitId: string, ts: Date): Promise<void> {
  await c.query(`UPDATE alert_unit_state SET evaluated_to = greatest(evaluated_to, $2) WHERE unit_id = $1`, [unitId, ts]);
}

export async function loadPending(c: Queryable, unitId: string): Promise<PendingCondition[]> {
  const { rows } = await c.query(`SELECT condition_key, kind, since, last_seen, grade, finding FROM alert_pending WHERE unit_id = $1`, [unitId]);
  return rows.map((r) => ({
    conditionKey: r.condition_key,
    kind: r.kind,
    since: date(r.since) as Date,
    lastSeen: date(r.last_seen) as Date,
    grade: r.grade,
    finding: r.finding,
  }));
}

/** Upserts the pending conditions given and deletes those keys removed. */
export async function savePending(c: Queryable, unitId: string, upserts: PendingCondition[], removed: string[]): Promise<void> {
  if (removed.length) await c.query(`DELETE FROM alert_pending WHERE unit_id = $1 AND condition_key = ANY($2)`, [unitId, removed]);
  if (upserts.length) {
    await c.query(
      `INSERT INTO alert_pending (unit_id, condition_key, kind, since, last_seen, grade, finding)
       SELECT $1, p.condition_key, p.kind, p.since, p.last_seen, p.grade, p.finding
         FROM jsonb_to_recordset($2::jsonb) AS p(condition_key text, kind text, since timestamptz, last_seen timestamptz, grade text, finding jsonb)
       ON CONFLICT (unit_id, condition_key) DO UPDATE
         SET kind = excluded.kind, since = excluded.since, last_seen = excluded.last_seen, grade = excluded.grade, finding = excluded.finding`,
      [
        unitId,
        JSON.stringify(upserts.map((p) => ({ condition_key: p.conditionKey, kind: p.kind, since: p.since.toISOString(), last_seen: p.lastSeen.toISOString(), grade: p.grade, finding: p.finding }))),
      ],
    );
  }
}

/** Open alerts of a unit raised by findings (not unit_silent), locked for the caller's transaction. */
export async function loadOpenRuleAlertsForUpdate(c: Queryable, unitId: string): Promise<AlertRow[]> {
  const { rows } = await c.query(
    `SELECT ${ALERT_COLUMNS} FROM alerts WHERE unit_id = $1 AND closed_at IS NULL AND kind <> 'unit_silent' ORDER BY raised_at FOR UPDATE`,
    [unitId],
  );
  return rows.map(alertFromDb);
}

// ---------------------------------------------------------------------------------------------
// Reading alerts.

export interface AlertCursor {
  raisedAt: string;
  id: string;
}

export function encodeCursor(c: AlertCursor | { id: string }): string {
  return Buffer.from(JSON.stringify(c)).toString('base64url');
}

/** The cursor, or undefined when it is not one this service made. */
export function decodeAlertCursor(s: string): AlertCursor | undefined {
  try {
    const v = JSON.parse(Buffer.from(s, 'base64url').toString('utf8'));
    if (typeof v?.raisedAt !== 'string' || typeof v?.id !== 'string') return undefined;
    if (!Number.isFinite(Date.parse(v.raisedAt)) || !/^[0-9a-f-]{36}$/.test(v.id)) return undefined;
    return { raisedAt: v.raisedAt, id: v.id };
  } catch {
    return undefined;
  }
}

export interface AlertFilter {
  /** The key's unit scope; null for every unit. */
  scope: string[] | null;
  unitId?: string;
  state: AlertStateFilter;
  grade?: Grade;
  minGrade?: Grade;
  kind?: AlertKind;
  cursor?: AlertCursor;
  limit: number;
  /** Wall-clock instant a shelf is judged at. */
  now: Date;
}

async function historyOf(db: Queryable, ids: string[]): Promise<Map<string, AlertHistoryJson[]>> {
  const out = new Map<string, AlertHistoryJson[]>();
  if (!ids.length) return out;
  const { rows } = await db.query(
    `SELECT id, alert_id, at, recorded_at, action, grade, from_grade, by, comment, details FROM alert_history WHERE alert_id = ANY($1) ORDER BY alert_id, id`,
    [ids],
  );
  for (const r of rows) {
    const list = out.get(r.alert_id) ?? [];
    list.push(historyFromDb(r));
    out.set(r.alert_id, list);
  }
  return out;
}

/** Alerts newest first (raised_at, then id), one page, each with its history; `next` is the cursor of the following page. */
export async function listAlerts(db: Queryable, f: AlertFilter): Promise<{ alerts: AlertJson[]; next: string | null }> {
  const { rows } = await db.query(
    `SELECT ${ALERT_COLUMNS} FROM alerts
      WHERE ($1::text[] IS NULL OR unit_id = ANY($1))
        AND ($2::text IS NULL OR unit_id = $2)
        AND CASE $3::text
              WHEN 'active' THEN active AND (shelved_until IS NULL OR shelved_until <= $4)
              WHEN 'cleared' THEN NOT active
              WHEN 'shelved' THEN shelved_until > $4
              WHEN 'open' THEN closed_at IS NULL
              ELSE true END
        AND ($5::text IS NULL OR grade = $5)
        AND ($6::int IS NULL OR array_position($7::text[], grade) - 1 >= $6)
        AND ($8::text IS NULL OR kind = $8)
        AND ($9::timestamptz IS NULL OR (raised_at, id) < ($9, $10::uuid))
      ORDER BY raised_at DESC, id DESC
      LIMIT $11`,
    [
      f.scope, f.unitId ?? null, f.state, f.now, f.grade ?? null, f.minGrade ? gradeRank(f.minGrade) : null, GRADES, f.kind ?? null,
      f.cursor?.raisedAt ?? null, f.cursor?.id ?? null, f.limit + 1,
    ],
  );
  const page = rows.slice(0, f.limit).map(alertFromDb);
  const hist = await historyOf(db, page.map((a) => a.id));
  const last = page[page.length - 1];
  return {
    alerts: page.map((a) => toAlertJson(a, hist.get(a.id) ?? [])),
    next: rows.length > f.limit && last ? encodeCursor({ raisedAt: last.raisedAt.toISOString(), id: last.id }) : null,
  };
}

const UUID = /^[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}$/i;

export async function getAlertRow(db: Queryable, id: string, forUpdate = false): Promise<AlertRow | undefined> {
  if (!UUID.test(id)) return undefined;
  const { rows } = await db.query(`SELECT ${ALERT_COLUMNS} FROM alerts WHERE id = $1${forUpdate ? ' FOR UPDATE' : ''}`, [id]);
  return rows[0] ? alertFromDb(rows[0]) : undefined;
}

/** One alert with its history, or undefined. */
export async function getAlert(db: Queryable, id: string): Promise<AlertJson | undefined> {
  const a = await getAlertRow(db, id);
  if (!a) return undefined;
  return toAlertJson(a, (await historyOf(db, [a.id])).get(a.id) ?? []);
}

/**
 * The unit's active alerts (condition present), most severe first, without history. Shelved
 * ones are left out unless asked for: a shelf hides an alert from people for its time.
 */
export async function listActiveAlerts(db: Queryable, unitId: string, opts: { includeShelved?: boolean; now?: Date } = {}): Promise<AlertJson[]> {
  const { rows } = await db.query({
    name: 'active_alerts_of_unit',
    text: `SELECT ${ALERT_COLUMNS} FROM alerts
      WHERE unit_id = $1 AND active AND ($2 OR shelved_until IS NULL OR shelved_until <= $3)
      ORDER BY array_position($4::text[], grade) DESC, raised_at DESC, id DESC`,
    values: [unitId, opts.includeShelved ?? false, opts.now ?? new Date(), GRADES],
  });
  return rows.map((r) => toAlertJson(alertFromDb(r)));
}

/** History rows of one alert, oldest first. */
export async function alertHistory(db: Queryable, alertId: string): Promise<AlertHistoryJson[]> {
  return (await historyOf(db, [alertId])).get(alertId) ?? [];
}

// ---------------------------------------------------------------------------------------------
// People's actions. Each runs in its own transaction with the alert row locked.

export class AlertClosedError extends Error {}

export interface ActionResult {
  alert: AlertJson;
  /** null when the action changed nothing (already acknowledged, not shelved). */
  change: AlertChange | null;
}

async function act(pool: pg.Pool, id: string, fn: (c: pg.PoolClient, a: AlertRow) => Promise<AlertChange | null>): Promise<ActionResult | undefined> {
  return withTransaction(pool, async (c) => {
    const a = await getAlertRow(c, id, true);
    if (!a) return undefined;
    const change = await fn(c, a);
    return { alert: toAlertJson(a, await alertHistory(c, a.id)), change };
  });
}

/**
 * Acknowledges an alert. An alert that has already returned to normal closes with its
 * acknowledgement (and loses any shelf). Acknowledging twice changes nothing.
 */
export async function acknowledgeAlert(pool: pg.Pool, id: string, p: { by: string; comment?: string | null; keyPrefix?: string | null; now: Date }): Promise<ActionResult | undefined> {
  return act(pool, id, async (c, a) => {
    if (a.acknowledged) return null;
    a.acknowledged = true;
    a.ackedAt = p.now;
    a.ackedBy = p.by;
    a.ackComment = p.comment ?? null;
    const closes = !a.active;
    if (closes) closeAlert(a, p.now);
    a.lastChangedAt = p.now;
    return recordChange(c, a, { action: 'acknowledged', at: p.now, by: p.by, comment: p.comment ?? null, details: { closed: closes, key: p.keyPrefix ?? null } });
  });
}

/** Marks a returned-to-normal, acknowledged alert closed; a closed alert keeps no shelf. */
export function closeAlert(a: AlertRow, at: Date): void {
  a.closedAt = at;
  a.shelvedUntil = null;
  a.pendingGrade = null;
  a.pendingGradeSince = null;
  a.absentSince = null;
}

/** Shelves an open alert until `until` (re-shelving replaces the shelf). Throws AlertClosedError for a closed alert. */
export async function shelveAlert(pool: pg.Pool, id: string, p: { by: string; until: Date; reason: string; keyPrefix?: string | null; now: Date }): Promise<ActionResult | undefined> {
  return act(pool, id, async (c, a) => {
    if (a.closedAt) throw new AlertClosedError(`alert ${a.id} is closed (returned to normal and acknowledged); there is nothing to shelve`);
    const previous = a.shelvedUntil && a.shelvedUntil > p.now ? a.shelvedUntil.toISOString() : null;
    a.shelvedUntil = p.until;
    a.shelvedAt = p.now;
    a.shelvedBy = p.by;
    a.shelveReason = p.reason;
    a.lastChangedAt = p.now;
    return recordChange(c, a, { action: 'shelved', at: p.now, by: p.by, comment: p.reason, details: { until: p.until.toISOString(), previousUntil: previous, key: p.keyPrefix ?? null } });
  });
}

/** Takes an alert off its shelf now. An alert not shelved is left as it is. */
export async function unshelveAlert(pool: pg.Pool, id: string, p: { by: string | null; keyPrefix?: string | null; now: Date }): Promise<ActionResult | undefined> {
  return act(pool, id, async (c, a) => {
    if (!isShelved(a, p.now)) return null;
    const until = a.shelvedUntil!.toISOString();
    a.shelvedUntil = null;
    a.lastChangedAt = p.now;
    return recordChange(c, a, { action: 'unshelved', at: p.now, by: p.by, details: { until, key: p.keyPrefix ?? null } });
  });
}

/**
 * Brings back up to `limit` alerts whose shelf ended at or before `now`, each with a
 * shelf_expired history row and its outbox rows, in one transaction; rows another worker holds
 * are skipped. Returns the changes (empty when none are due).
 */
export async function expireDueShelves(pool: pg.Pool, now: Date, limit: number): Promise<AlertChange[]> {
  return withTransaction(pool, async (c) => {
    const { rows } = await c.query(
      `SELECT ${ALERT_COLUMNS} FROM alerts WHERE shelved_until <= $1 ORDER BY shelved_until, id LIMIT $2 FOR UPDATE SKIP LOCKED`,
      [now, limit],
    );
    const changes: AlertChange[] = [];
    for (const r of rows) {
      const a = alertFromDb(r);
      const until = a.shelvedUntil!;
      a.shelvedUntil = null;
      a.lastChangedAt = now;
      changes.push(await recordChange(c, a, { action: 'shelf_expired', at: now, details: { until: until.toISOString(), shelvedBy: a.shelvedBy, reason: a.shelveReason } }));
    }
    return changes;
  });
}

// ---------------------------------------------------------------------------------------------
// unit_silent support.

export interface UnitFreshness {
  unitId: string;
  /** The latest stored ring (by ring time) and when it arrived; null when the unit has sent none. */
  lastRing: LatestRing | null;
  /** The open unit_silent alert, if any. */
  silentAlertId: string | null;
  silentActive: boolean;
}

export interface LatestRing {
  ts: Date;
  receivedAt: Date;
}

/** Every unit with its latest ring and its open unit_silent alert. */
export async function unitFreshness(db: Queryable): Promise<UnitFreshness[]> {
  const { rows } = await db.query(
    `SELECT u.id, l.ts, l.received_at, a.id AS alert_id, a.active
       FROM units u
       LEFT JOIN LATERAL (SELECT r.ts, r.received_at FROM rings r WHERE r.unit_id = u.id ORDER BY r.ts DESC LIMIT 1) l ON true
       LEFT JOIN alerts a ON a.unit_id = u.id AND a.condition_key = 'unit_silent' AND a.closed_at IS NULL
      ORDER BY u.id`,
  );
  return rows.map((r) => ({
    unitId: r.id,
    lastRing: r.ts ? { ts: date(r.ts) as Date, receivedAt: date(r.received_at) as Date } : null,
    silentAlertId: r.alert_id ?? null,
    silentActive: Boolean(r.active),
  }));
}

/**
 * Takes a transaction-level advisory lock on one condition of one unit, without waiting;
 * false when another transaction holds it.
 */
export async function tryLockCondition(c: Queryable, unitId: string, conditionKey: string): Promise<boolean> {
  const { rows } = await c.query(`SELECT pg_try_advisory_xact_lock(hashtext('cansight.alert'), hashtext($1 || '/' || $2)) AS ok`, [unitId, conditionKey]);
  return Boolean(rows[0].ok);
}

/** The unit's latest ring by ring time, with when it arrived; null when it has sent none. */
export async function latestRing(c: Queryable, unitId: string): Promise<LatestRing | null> {
  const { rows } = await c.query(`SELECT ts, received_at FROM rings WHERE unit_id = $1 ORDER BY ts DESC LIMIT 1`, [unitId]);
  return rows[0] ? { ts: date(rows[0].ts) as Date, receivedAt: date(rows[0].received_at) as Date } : null;
}

export async function openAlertForUpdate(c: Queryable, unitId: string, conditionKey: string): Promise<AlertRow | undefined> {
  const { rows } = await c.query(`SELECT ${ALERT_COLUMNS} FROM alerts WHERE unit_id = $1 AND condition_key = $2 AND closed_at IS NULL FOR UPDATE`, [unitId, conditionKey]);
  return rows[0] ? alertFromDb(rows[0]) : undefined;
}

// ---------------------------------------------------------------------------------------------
// Webhooks.

export interface WebhookJson {
  id: string;
  url: string;
  minGrade: Grade;
  unitIds: string[] | null;
  createdAt: string;
  createdBy: string | null;
  deletedAt: string | null;
}

function webhookFromDb(r: Record<string, unknown>): WebhookJson {
  return {
    id: String(r.id),
    url: String(r.url),
    minGrade: r.min_grade as Grade,
    unitIds: (r.unit_ids as string[] | null) ?? null,
    createdAt: iso(date(r.created_at)) as string,
    createdBy: (r.created_by as string | null) ?? null,
    deletedAt: iso(date(r.deleted_at)),
  };
}

const WEBHOOK_COLUMNS = `id, url, min_grade, unit_ids, created_at, created_by, deleted_at`;

export async function createWebhook(db: Queryable, w: { url: string; minGrade: Grade; secret: string; unitIds: string[] | null; createdBy: string | null; id?: string }): Promise<WebhookJson> {
  const { rows } = await db.query(
    `INSERT INTO webhooks (id, url, min_grade, secret, unit_ids, created_by) VALUES ($1, $2, $3, $4, $5, $6) RETURNING ${WEBHOOK_COLUMNS}`,
    [w.id ?? randomUUID(), w.url, w.minGrade, w.secret, w.unitIds, w.createdBy],
  );
  return webhookFromDb(rows[0]);
}

/** Live subscriptions, oldest first. */
export async function listWebhooks(db: Queryable): Promise<WebhookJson[]> {
  const { rows } = await db.query(`SELECT ${WEBHOOK_COLUMNS} FROM webhooks WHERE deleted_at IS NULL ORDER BY created_at, id`);
  return rows.map(webhookFromDb);
}

/** A subscription, deleted ones included (their delivery log stays readable). */
export async function getWebhook(db: Queryable, id: string): Promise<WebhookJson | undefined> {
  if (!UUID.test(id)) return undefined;
  const { rows } = await db.query(`SELECT ${WEBHOOK_COLUMNS} FROM webhooks WHERE id = $1`, [id]);
  return rows[0] ? webhookFromDb(rows[0]) : undefined;
}

/** Deletes a live subscription (kept for its log) and cancels its undelivered events; false when there is none. */
export async function deleteWebhook(pool: pg.Pool, id: string): Promise<boolean> {
  if (!UUID.test(id)) return false;
  return withTransaction(pool, async (c) => {
    const { rowCount } = await c.query(`UPDATE webhooks SET deleted_at = now() WHERE id = $1 AND deleted_at IS NULL`, [id]);
    if (!rowCount) return false;
    await c.query(`UPDATE webhook_outbox SET state = 'cancelled' WHERE webhook_id = $1 AND state = 'pending'`, [id]);
    return true;
  });
}

export interface DeliveryJson {
  id: string;
  outboxId: string;
  alertId: string;
  unitId: string;
  event: string;
  attempt: number;
  attemptedAt: string;
  durationMs: number;
  statusCode: number | null;
  error: string | null;
  outcome: 'delivered' | 'retry' | 'dead';
}

/** The delivery log of one subscription, newest attempt first, one page. */
export async function listDeliveries(db: Queryable, webhookId: string, p: { afterId?: string; limit: number }): Promise<{ deliveries: DeliveryJson[]; next: string | null }> {
  const { rows } = await db.query(
    `SELECT d.id, d.outbox_id, o.alert_id, d.unit_id, o.event, d.attempt, d.attempted_at, d.duration_ms, d.status_code, d.error, d.outcome
       FROM webhook_deliveries d JOIN webhook_outbox o ON o.id = d.outbox_id
      WHERE d.webhook_id = $1 AND ($2::bigint IS NULL OR d.id < $2)
      ORDER BY d.id DESC LIMIT $3`,
    [webhookId, p.afterId ?? null, p.limit + 1],
  );
  const page = rows.slice(0, p.limit).map((r) => ({
    id: String(r.id),
    outboxId: String(r.outbox_id),
    alertId: String(r.alert_id),
    unitId: String(r.unit_id),
    event: String(r.event),
    attempt: Number(r.attempt),
    attemptedAt: iso(date(r.attempted_at)) as string,
    durationMs: Number(r.duration_ms),
    statusCode: num(r.status_code),
    error: (r.error as string | null) ?? null,
    outcome: r.outcome,
  }));
  return { deliveries: page, next: rows.length > p.limit && page.length ? encodeCursor({ id: page[page.length - 1].id }) : null };
}

/** The delivery-log cursor's id, or undefined when the cursor is not one this service made. */
export function decodeDeliveryCursor(s: string): string | undefined {
  try {
    const v = JSON.parse(Buffer.from(s, 'base64url').toString('utf8'));
    return typeof v?.id === 'string' && /^\d{1,19}$/.test(v.id) ? v.id : undefined;
  } catch {
    return undefined;
  }
}

/** An outbox row claimed for one HTTP attempt. */
export interface ClaimedDelivery {
  outboxId: string;
  webhookId: string;
  alertId: string;
  unitId: string;
  event: string;
  body: string;
  /** This attempt's number, from 1. */
  attempt: number;
  url: string;
  secret: string;
}

/**
 * Claims up to `limit` due outbox rows of live subscriptions (skipping rows another worker holds),
 * counts the attempt and pushes their next attempt `leaseS` ahead, so a worker that dies during
 * the HTTP call leaves the row to be tried again after the lease. Rows that already used every
 * try (a worker died on the last one) are dead-lettered first.
 */
export async function claimDueDeliveries(pool: pg.Pool, now: Date, p: { limit: number; leaseS: number; maxTries: number }): Promise<ClaimedDelivery[]> {
  await pool.query(
    `UPDATE webhook_outbox SET state = 'dead', last_error = coalesce(last_error, 'no answer recorded for the last try')
      WHERE state = 'pending' AND attempts >= $2 AND next_attempt_at <= $1`,
    [now, p.maxTries],
  );
  const { rows } = await pool.query(
    `WITH due AS (
       SELECT o.id FROM webhook_outbox o
        WHERE o.state = 'pending' AND o.next_attempt_at <= $1 AND o.attempts < $4
        ORDER BY o.next_attempt_at, o.id
        LIMIT $2
        FOR UPDATE SKIP LOCKED)
     UPDATE webhook_outbox o
        SET attempts = o.attempts + 1, next_attempt_at = $1::timestamptz + make_interval(secs => $3)
       FROM due, webhooks w
      WHERE o.id = due.id AND w.id = o.webhook_id AND w.deleted_at IS NULL
     RETURNING o.id, o.webhook_id, o.alert_id, o.unit_id, o.event, o.body, o.attempts, w.url, w.secret`,
    [now, p.limit, p.leaseS, p.maxTries],
  );
  return rows.map((r) => ({
    outboxId: String(r.id),
    webhookId: String(r.webhook_id),
    alertId: String(r.alert_id),
    unitId: String(r.unit_id),
    event: String(r.event),
    body: String(r.body),
    attempt: Number(r.attempts),
    url: String(r.url),
    secret: String(r.secret),
  }));
}

export interface AttemptResult {
  outboxId: string;
  webhookId: string;
  unitId: string;
  attempt: number;
  attemptedAt: Date;
  durationMs: number;
  statusCode: number | null;
  error: string | null;
  outcome: 'delivered' | 'retry' | 'dead';
  /** For a retry: when to try again. */
  nextAttemptAt: Date | null;
}

/**
 * Logs one attempt and moves its outbox row on (delivered, due again at nextAttemptAt, or dead),
 * in one statement. The row moves only if it is still the claimed attempt of a pending row.
 */
export async function finishAttempt(db: Queryable, r: AttemptResult): Promise<void> {
  await db.query(
    `WITH moved AS (
       UPDATE webhook_outbox
          SET state = CASE $9::text WHEN 'delivered' THEN 'delivered' WHEN 'dead' THEN 'dead' ELSE 'pending' END,
              delivered_at = CASE WHEN $9 = 'delivered' THEN $5::timestamptz ELSE delivered_at END,
              next_attempt_at = coalesce($10::timestamptz, next_attempt_at),
              last_error = CASE WHEN $9 = 'delivered' THEN NULL ELSE coalesce($8::text, 'HTTP ' || $7::int) END
        WHERE id = $1::bigint AND attempts = $4::int AND state = 'pending'
       RETURNING id)
     INSERT INTO webhook_deliveries (outbox_id, webhook_id, unit_id, attempt, attempted_at, duration_ms, status_code, error, outcome)
     VALUES ($1::bigint, $2::uuid, $3::text, $4::int, $5::timestamptz, $6::int, $7::int, $8::text, $9::text)`,
    [r.outboxId, r.webhookId, r.unitId, r.attempt, r.attemptedAt, Math.round(r.durationMs), r.statusCode, r.error, r.outcome, r.nextAttemptAt],
  );
}

/**
 * Deletes up to `limit` finished outbox rows (delivered, dead, cancelled) created before
 * `before`, with their delivery log; returns how many went.
 */
export async function pruneWebhookLog(db: Queryable, before: Date, limit: number): Promise<number> {
  const { rowCount } = await db.query(
    `DELETE FROM webhook_outbox WHERE id IN (
       SELECT id FROM webhook_outbox WHERE state <> 'pending' AND created_at < $1 ORDER BY id LIMIT $2 FOR UPDATE SKIP LOCKED)`,
    [before, limit],
  );
  return rowCount ?? 0;
}

/** State and attempt count of an outbox row (for tests and diagnostics). */
export async function outboxRows(db: Queryable, where: { alertId?: string; webhookId?: string } = {}): Promise<Array<{ id: string; webhookId: string; alertId: string; event: string; body: string; state: string; attempts: number; nextAttemptAt: Date; deliveredAt: Date | null; lastError: string | null }>> {
  const { rows } = await db.query(
    `SELECT id, webhook_id, alert_id, event, body, state, attempts, next_attempt_at, delivered_at, last_error FROM webhook_outbox
      WHERE ($1::uuid IS NULL OR alert_id = $1) AND ($2::uuid IS NULL OR webhook_id = $2) ORDER BY id`,
    [where.alertId ?? null, where.webhookId ?? null],
  );
  return rows.map((r) => ({
    id: String(r.id),
    webhookId: String(r.webhook_id),
    alertId: String(r.alert_id),
    event: String(r.event),
    body: String(r.body),
    state: String(r.state),
    attempts: Number(r.attempts),
    nextAttemptAt: date(r.next_attempt_at) as Date,
    deliveredAt: date(r.delivered_at),
    lastError: (r.last_error as string | null) ?? null,
  }));
}

/** Bound to one pool, for route handlers. */
export function createAlertsRepository(pool: pg.Pool) {
  return {
    list: (f: AlertFilter) => listAlerts(pool, f),
    get: (id: string) => getAlert(pool, id),
    getRow: (id: string) => getAlertRow(pool, id),
    listActive: (unitId: string, opts?: { includeShelved?: boolean; now?: Date }) => listActiveAlerts(pool, unitId, opts),
    acknowledge: (id: string, p: Parameters<typeof acknowledgeAlert>[2]) => acknowledgeAlert(pool, id, p),
    shelve: (id: string, p: Parameters<typeof shelveAlert>[2]) => shelveAlert(pool, id, p),
    unshelve: (id: string, p: Parameters<typeof unshelveAlert>[2]) => unshelveAlert(pool, id, p),
    createWebhook: (w: Parameters<typeof createWebhook>[1]) => createWebhook(pool, w),
    listWebhooks: () => listWebhooks(pool),
    getWebhook: (id: string) => getWebhook(pool, id),
    deleteWebhook: (id: string) => deleteWebhook(pool, id),
    listDeliveries: (webhookId: string, p: { afterId?: string; limit: number }) => listDeliveries(pool, webhookId, p),
  };
}

export type AlertsRepository = ReturnType<typeof createAlertsRepository>;
