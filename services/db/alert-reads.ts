/**
 * Reading alerts: the list with its filters and cursor (newest first), one alert with its
 * history, a unit's active alerts, and the history alone.
 */
import { GRADES, gradeRank, type Grade } from '../core/findings.ts';
import type { AlertKind } from './config.ts';
import { ALERT_COLUMNS, alertFromDb, historyFromDb, toAlertJson, type AlertHistoryJson, type AlertJson, type AlertRow, type AlertStateFilter, type Queryable } from './alert-rows.ts';

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

export const UUID = /^[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}$/i;

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
