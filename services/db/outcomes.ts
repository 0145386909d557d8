/**
 * Inspection outcomes repository: the outcome recorded against a chamber or thermocouple alert
 * (table alert_outcomes), and the calls to inspect with their outcomes, for one unit or a set
 * of units. Counting them is core/outcomes.ts.
 */
import type pg from 'pg';
import { CALL_KINDS, type OutcomeValue } from '../core/outcomes.ts';

export interface OutcomeRecord {
  outcome: OutcomeValue;
  found: string | null;
  inspectedAt: string | null;
  recordedBy: string;
  recordedAt: string;
}

export interface CallRow {
  alertId: string;
  unitId: string;
  site: string;
  kind: string;
  chamber: number | null;
  thermocouple: number | null;
  grade: string;
  raisedAt: string;
  active: boolean;
  message: string;
  outcome: OutcomeRecord | null;
}

const iso = (v: unknown): string | null => (v === null || v === undefined ? null : v instanceof Date ? v.toISOString() : String(v));

function callFromDb(r: Record<string, unknown>): CallRow {
  return {
    alertId: String(r.id),
    unitId: String(r.unit_id),
    site: String(r.site),
    kind: String(r.kind),
    chamber: r.chamber === null ? null : Number(r.chamber),
    thermocouple: r.thermocouple === null ? null : Number(r.thermocouple),
    grade: String(r.grade),
    raisedAt: iso(r.raised_at)!,
    active: Boolean(r.active),
    message: String(r.message),
    outcome: r.outcome === null
      ? null
      : { outcome: r.outcome as OutcomeValue, found: (r.found as string | null) ?? null, inspectedAt: iso(r.inspected_at), recordedBy: String(r.recorded_by), recordedAt: iso(r.recorded_at)! },
  };
}

/** Every call to inspect (chamber and thermocouple alerts) of the units listed (null: every unit), by unit and oldest first, with its outcome. */
export async function listCalls(db: Pick<pg.Pool, 'query'>, unitIds: readonly string[] | null): Promise<CallRow[]> {
  const { rows } = await db.query(
    `SELECT a.id, a.unit_id, u.site, a.kind, a.chamber, a.thermocouple, a.grade, a.raised_at, a.active, a.message,
            o.outcome, o.found, o.inspected_at, o.recorded_by, o.recorded_at
       FROM alerts a JOIN units u ON u.id = a.unit_id
       LEFT JOIN alert_outcomes o ON o.unit_id = a.unit_id AND o.alert_id = a.id
      WHERE a.kind = ANY($1::text[]) AND ($2::text[] IS NULL OR a.unit_id = ANY($2::text[]))
      ORDER BY a.unit_id, a.raised_at, a.id`,
    [CALL_KINDS, unitIds],
  );
  return rows.map(callFromDb);
}

export function createOutcomesRepository(pool: pg.Pool) {
  return {
    /** Records (or replaces) the outcome of an alert; returns it as stored. */
    async record(p: { alertId: string; unitId: string; outcome: OutcomeValue; found: string | null; inspectedAt: Date | null; by: string; keyId: string | null }): Promise<OutcomeRecord> {
      const { rows } = await pool.query(
        `INSERT INTO alert_outcomes (alert_id, unit_id, outcome, found, inspected_at, recorded_by, key_id)
         VALUES ($1, $2, $3, $4, $5, $6, $7)
         ON CONFLICT (unit_id, alert_id) DO UPDATE SET outcome = EXCLUDED.outcome, found = EXCLUDED.found, inspected_at = EXCLUDED.inspected_at,
           recorded_by = EXCLUDED.recorded_by, key_id = EXCLUDED.key_id, recorded_at = now()
         RETURNING outcome, found, inspected_at, recorded_by, recorded_at`,
        [p.alertId, p.unitId, p.outcome, p.found, p.inspectedAt, p.by, p.keyId],
      );
      const r = rows[0];
      return { outcome: r.outcome, found: r.found, inspectedAt: iso(r.inspected_at), recordedBy: r.recorded_by, recordedAt: iso(r.recorded_at)! };
    },

    calls: (unitIds: readonly string[] | null) => listCalls(pool, unitIds),
  };
}

export type OutcomesRepository = ReturnType<typeof createOutcomesRepository>;
