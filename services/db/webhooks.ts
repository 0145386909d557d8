/**
 * Webhooks: subscriptions, the body of one alert change and its signature, the outbox rows a
 * change writes for the subscriptions that want it, claiming due deliveries, recording each
 * attempt, and the delivery log (listed, and pruned after the days it is kept).
 */
import { createHmac, randomUUID } from 'node:crypto';
import type pg from 'pg';
import { ADVISORY_CAUTION, type Grade } from '../core/findings.ts';
import { withTransaction } from './pool.ts';
import { UUID, encodeCursor } from './alert-reads.ts';
import { date, iso, num, toAlertJson, type AlertChange, type AlertRow, type Queryable } from './alert-rows.ts';

/** The header that carries a delivery's signature, and the one with the time it was sent. */
export const SIGNATURE_HEADER = 'x-cansight-signature';
export const TIMESTAMP_HEADER = 'x-cansight-timestamp';

/**
 * The signature header value of one attempt: "sha256=" and the hex HMAC-SHA256, keyed with the
 * secret, of the timestamp header's value, a full stop and the raw body. Covering the time lets
 * a receiver refuse a delivery replayed later.
 */
export function signBody(secret: string, timestamp: string, body: string): string {
  return 'sha256=' + createHmac('sha256', secret).update(`${timestamp}.${body}`, 'utf8').digest('hex');
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

export interface WebhookJson {
  id: string;
  url: string;
  minGrade: Grade;
  unitIds: string[] | null;
  includeHistory: boolean;
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
    includeHistory: Boolean(r.include_history),
    createdAt: iso(date(r.created_at)) as string,
    createdBy: (r.created_by as string | null) ?? null,
    deletedAt: iso(date(r.deleted_at)),
  };
}

const WEBHOOK_COLUMNS = `id, url, min_grade, unit_ids, include_history, created_at, created_by, deleted_at`;

export async function createWebhook(db: Queryable, w: { url: string; minGrade: Grade; secret: string; unitIds: string[] | null; includeHistory?: boolean; createdBy: string | null; id?: string }): Promise<WebhookJson> {
  const { rows } = await db.query(
    `INSERT INTO webhooks (id, url, min_grade, secret, unit_ids, include_history, created_by) VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING ${WEBHOOK_COLUMNS}`,
    [w.id ?? randomUUID(), w.url, w.minGrade, w.secret, w.unitIds, w.includeHistory === true, w.createdBy],
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
