/**
 * What the alert rules (services/worker/alerts.ts) read and keep between calls: the unit's alert
 * state locked, its ring-time watermark, the conditions waiting out their on-delay, the open
 * rule alerts; and for `unit_silent`, how fresh each unit's data is, with a lock per condition.
 */
import type { Grade } from '../core/findings.ts';
import type { AlertKind } from './config.ts';
import { ALERT_COLUMNS, alertFromDb, date, type AlertRow, type Queryable } from './alert-rows.ts';

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
