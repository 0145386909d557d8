/**
 * Writing one change of an alert's state: `recordChange` writes the alert row, its one history
 * row and the outbox rows of the subscriptions that want it, on the caller's client, so all
 * three commit or roll back together. Nothing here decides when alerts are raised or cleared
 * (services/worker/alerts.ts does).
 */
import { randomUUID } from 'node:crypto';
import { GRADES, gradeRank } from '../core/findings.ts';
import { ALERT_COLUMNS, alertFromDb, isShelved, type AlertChange, type AlertRow, type ChangeInput, type Queryable } from './alert-rows.ts';
import type { Grade } from '../core/findings.ts';
import { webhookBody } from './webhooks.ts';

function alertParams(a: AlertRow): unknown[] {
  return [
    a.id, a.unitId, a.kind, a.conditionKey, a.grade, a.chamber, a.thermocouple, a.active, a.acknowledged, a.ackedAt, a.ackedBy, a.ackComment,
    a.shelvedUntil, a.shelvedAt, a.shelvedBy, a.shelveReason, a.raisedAt, a.lastChangedAt, a.clearedAt, a.closedAt, a.message, a.advice,
    JSON.stringify(a.evidence), a.likelihood, a.runnerUpChamber, a.runnerUpLikelihood, a.baselineVersion, a.lastSeenAt, a.absentSince,
    a.pendingGrade, a.pendingGradeSince, a.foundInHistory, a.historyAnnounced,
  ];
}

/** Inserts a new alert row (a.id is set here when empty). Fails with 23505 if the condition already has an open alert. */
export async function insertAlert(c: Queryable, a: AlertRow): Promise<AlertRow> {
  if (!a.id) a.id = randomUUID();
  await c.query(
    `INSERT INTO alerts (${ALERT_COLUMNS})
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20, $21, $22, $23, $24, $25, $26, $27, $28, $29, $30, $31, $32, $33)`,
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
       pending_grade = $30, pending_grade_since = $31, found_in_history = $32, history_announced = $33, updated_at = now()
     WHERE id = $1 AND unit_id = $2 AND kind = $3 AND condition_key = $4`,
    alertParams(a),
  );
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
    // An alert found in history is announced once its unit has caught up (announceHistoricAlerts);
    // until then only the subscriptions that ask for history hear of its changes.
    await enqueue(c, a, change, a.foundInHistory && !a.historyAnnounced ? 'history' : 'all', input.fromGrade ?? null);
  }
  return change;
}

/** Outbox rows of one change for the live subscriptions whose units and minimum grade match, and which want it ('history': those that ask for history; 'live': those that do not). */
async function enqueue(c: Queryable, a: AlertRow, change: AlertChange, who: 'all' | 'history' | 'live', fromGrade: Grade | null): Promise<void> {
  const rank = Math.max(gradeRank(a.grade), fromGrade ? gradeRank(fromGrade) : -1);
  const { rowCount } = await c.query(
    `INSERT INTO webhook_outbox (webhook_id, alert_id, unit_id, history_id, event, body)
     SELECT id, $1, $2, $3, $4, $5 FROM webhooks
      WHERE deleted_at IS NULL AND array_position($6::text[], min_grade) - 1 <= $7
        AND (unit_ids IS NULL OR $2 = ANY(unit_ids))
        AND ($8 = 'all' OR include_history = ($8 = 'history'))`,
    [a.id, a.unitId, change.historyId, change.action, webhookBody(randomUUID(), a, change), GRADES, rank, who],
  );
  // A subscriber has heard of it: a re-analysis sets it aside instead of removing it (reanalysis.ts).
  if (rowCount) await c.query(`UPDATE alerts SET pushed = true WHERE id = $1 AND NOT pushed`, [a.id]);
}

/**
 * For units whose analysis has caught up: each alert found in history and not yet announced is
 * announced now, once, if it is still active and not shelved (a 'raised' event at its ring time,
 * to the subscriptions that did not already hear of it as history); those that cleared inside
 * the catch-up are only recorded. Returns the alerts announced.
 */
export async function announceHistoricAlerts(c: Queryable, unitIds: string[], now = new Date()): Promise<number> {
  if (unitIds.length === 0) return 0;
  const { rows } = await c.query(
    `UPDATE alerts SET history_announced = true
      WHERE unit_id = ANY($1::text[]) AND found_in_history AND NOT history_announced
      RETURNING ${ALERT_COLUMNS}`,
    [unitIds],
  );
  let n = 0;
  for (const r of rows) {
    const a = alertFromDb(r);
    if (!a.active || isShelved(a, now)) continue;
    const h = await c.query(`SELECT id FROM alert_history WHERE alert_id = $1 AND action IN ('raised', 'reactivated') ORDER BY id DESC LIMIT 1`, [a.id]);
    if (h.rows.length === 0) continue;
    const change: AlertChange = {
      alertId: a.id, unitId: a.unitId, kind: a.kind, chamber: a.chamber, thermocouple: a.thermocouple,
      action: 'raised', grade: a.grade, fromGrade: null, at: a.raisedAt, historyId: String(h.rows[0].id),
    };
    await enqueue(c, a, change, 'live', null);
    n++;
  }
  return n;
}
