/**
 * People's actions on an alert (acknowledge, shelve, unshelve) and a shelf's expiry. Each runs
 * in its own transaction with the alert row locked, and is written as a change (alert-changes.ts);
 * these need no rule, so the repository owns what they do to a row.
 */
import type pg from 'pg';
import { withTransaction } from './pool.ts';
import { recordChange } from './alert-changes.ts';
import { alertHistory, getAlertRow } from './alert-reads.ts';
import { ALERT_COLUMNS, alertFromDb, isShelved, toAlertJson, type AlertChange, type AlertJson, type AlertRow } from './alert-rows.ts';

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
export async function acknowledgeAlert(pool: pg.Pool, id: string, p: { by: string; comment?: string | null; keyId?: string | null; now: Date }): Promise<ActionResult | undefined> {
  return act(pool, id, async (c, a) => {
    if (a.acknowledged) return null;
    a.acknowledged = true;
    a.ackedAt = p.now;
    a.ackedBy = p.by;
    a.ackComment = p.comment ?? null;
    const closes = !a.active;
    if (closes) closeAlert(a, p.now);
    a.lastChangedAt = p.now;
    return recordChange(c, a, { action: 'acknowledged', at: p.now, by: p.by, comment: p.comment ?? null, details: { closed: closes, key: p.keyId ?? null } });
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
export async function shelveAlert(pool: pg.Pool, id: string, p: { by: string; until: Date; reason: string; keyId?: string | null; now: Date }): Promise<ActionResult | undefined> {
  return act(pool, id, async (c, a) => {
    if (a.closedAt) throw new AlertClosedError(`alert ${a.id} is closed (returned to normal and acknowledged); there is nothing to shelve`);
    const previous = a.shelvedUntil && a.shelvedUntil > p.now ? a.shelvedUntil.toISOString() : null;
    a.shelvedUntil = p.until;
    a.shelvedAt = p.now;
    a.shelvedBy = p.by;
    a.shelveReason = p.reason;
    a.lastChangedAt = p.now;
    return recordChange(c, a, { action: 'shelved', at: p.now, by: p.by, comment: p.reason, details: { until: p.until.toISOString(), previousUntil: previous, key: p.keyId ?? null } });
  });
}

/** Takes an alert off its shelf now. An alert not shelved is left as it is. */
export async function unshelveAlert(pool: pg.Pool, id: string, p: { by: string | null; keyId?: string | null; now: Date }): Promise<ActionResult | undefined> {
  return act(pool, id, async (c, a) => {
    if (!isShelved(a, p.now)) return null;
    const until = a.shelvedUntil!.toISOString();
    a.shelvedUntil = null;
    a.lastChangedAt = p.now;
    return recordChange(c, a, { action: 'unshelved', at: p.now, by: p.by, details: { until, key: p.keyId ?? null } });
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
