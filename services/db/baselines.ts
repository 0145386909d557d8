/**
 * Baselines repository: versioned baselines against corrected load. Versions are numbered per
 * unit from 1 and never changed once written; the newest version is the one in force.
 */
import type pg from 'pg';
import { parseBaseline, type UnitBaseline } from '../core/baseline.ts';

type Queryable = pg.Pool | pg.ClientBase;

export interface BaselineRecord {
  unitId: string;
  version: number;
  windowFrom: Date;
  windowTo: Date;
  method: string;
  fittedAt: Date;
  fittedBy: string;
  sampleCount: number;
  baseline: UnitBaseline;
}

function fromRow(r: Record<string, unknown>): BaselineRecord {
  return {
    unitId: r.unit_id as string,
    version: r.version as number,
    windowFrom: r.window_from as Date,
    windowTo: r.window_to as Date,
    method: r.method as string,
    fittedAt: r.fitted_at as Date,
    fittedBy: r.fitted_by as string,
    sampleCount: r.sample_count as number,
    baseline: parseBaseline(JSON.stringify(r.body)),
  };
}

/** The newest baseline version number of a unit (0 when none). */
export async function latestBaselineVersion(q: Queryable, unitId: string): Promise<number> {
  const { rows } = await q.query(`SELECT coalesce(max(version), 0) AS v FROM baselines WHERE unit_id = $1`, [unitId]);
  return rows[0].v as number;
}

/** The baseline in force (newest version), or null. */
export async function latestBaseline(q: Queryable, unitId: string): Promise<BaselineRecord | null> {
  const { rows } = await q.query(`SELECT * FROM baselines WHERE unit_id = $1 ORDER BY version DESC LIMIT 1`, [unitId]);
  return rows.length ? fromRow(rows[0]) : null;
}

/** One version, or null. */
export async function baselineVersion(q: Queryable, unitId: string, version: number): Promise<BaselineRecord | null> {
  const { rows } = await q.query(`SELECT * FROM baselines WHERE unit_id = $1 AND version = $2`, [unitId, version]);
  return rows.length ? fromRow(rows[0]) : null;
}

/** Every version of a unit, newest first. */
export async function listBaselines(q: Queryable, unitId: string): Promise<BaselineRecord[]> {
  const { rows } = await q.query(`SELECT * FROM baselines WHERE unit_id = $1 ORDER BY version DESC`, [unitId]);
  return rows.map(fromRow);
}

/**
 * Stores a new version numbered after the newest one. `build` receives that number and returns
 * the baseline to store; unit-level advisory lock so two fits of one unit take turns. With a
 * request id, the request is marked fitted in the same transaction, and nothing is stored
 * (null) when the request is no longer pending.
 */
export async function insertBaseline(client: pg.ClientBase, unitId: string, build: (version: number) => UnitBaseline, requestId?: string): Promise<BaselineRecord | null> {
  await client.query(`SELECT pg_advisory_xact_lock(hashtext('cansight-baseline:' || $1))`, [unitId]);
  if (requestId !== undefined) {
    // A request is fitted once: whoever holds its row while it is still pending.
    const { rows } = await client.query(`SELECT state FROM baseline_requests WHERE id = $1 FOR UPDATE`, [requestId]);
    if (rows.length === 0 || rows[0].state !== 'pending') return null;
  }
  const version = (await latestBaselineVersion(client, unitId)) + 1;
  const b = build(version);
  const { rows } = await client.query(
    `INSERT INTO baselines (unit_id, version, window_from, window_to, method, fitted_at, fitted_by, sample_count, body)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9) RETURNING *`,
    [unitId, version, b.window.from, b.window.to, b.method, b.fittedAt, b.fittedBy, b.sampleCount, JSON.stringify(b)],
  );
  if (requestId !== undefined) {
    await client.query(`UPDATE baseline_requests SET state = 'fitted', version = $2, finished_at = now() WHERE id = $1`, [requestId, version]);
  }
  return fromRow(rows[0]);
}

/** Time of the first steady analysed ring of a unit (ms), or null. */
export async function firstSteadyMs(q: Queryable, unitId: string): Promise<number | null> {
  const { rows } = await q.query(
    `SELECT (extract(epoch from ts) * 1000)::float8 AS t FROM ring_analysis WHERE unit_id = $1 AND steady ORDER BY ts LIMIT 1`,
    [unitId],
  );
  return rows.length ? Number(rows[0].t) : null;
}

export interface BaselineRequestRecord {
  id: string;
  unitId: string;
  windowFrom: Date;
  windowTo: Date;
  requestedBy: string;
  requestedAt: Date;
  state: 'pending' | 'fitted' | 'failed';
  version: number | null;
  error: string | null;
  finishedAt: Date | null;
}

function requestFromRow(r: Record<string, unknown>): BaselineRequestRecord {
  return {
    id: r.id as string,
    unitId: r.unit_id as string,
    windowFrom: r.window_from as Date,
    windowTo: r.window_to as Date,
    requestedBy: r.requested_by as string,
    requestedAt: r.requested_at as Date,
    state: r.state as BaselineRequestRecord['state'],
    version: (r.version as number | null) ?? null,
    error: (r.error as string | null) ?? null,
    finishedAt: (r.finished_at as Date | null) ?? null,
  };
}

/** Records a request to fit a baseline once the window is analysed. */
export async function insertBaselineRequest(q: Queryable, unitId: string, fromMs: number, toMs: number, by: string): Promise<BaselineRequestRecord> {
  const { rows } = await q.query(
    `INSERT INTO baseline_requests (unit_id, window_from, window_to, requested_by) VALUES ($1, $2, $3, $4) RETURNING *`,
    [unitId, new Date(fromMs), new Date(toMs), by],
  );
  return requestFromRow(rows[0]);
}

/** Requests of a unit, newest first (pending ones and the last finished ones). */
export async function listBaselineRequests(q: Queryable, unitId: string, limit = 20): Promise<BaselineRequestRecord[]> {
  const { rows } = await q.query(`SELECT * FROM baseline_requests WHERE unit_id = $1 ORDER BY requested_at DESC LIMIT $2`, [unitId, limit]);
  return rows.map(requestFromRow);
}

/** Pending requests of these units whose window ends at or before the unit's analysis watermark. */
export async function dueBaselineRequests(q: Queryable, unitIds: string[]): Promise<BaselineRequestRecord[]> {
  if (unitIds.length === 0) return [];
  const { rows } = await q.query(
    `SELECT r.* FROM baseline_requests r JOIN analysis_progress p USING (unit_id)
      WHERE r.unit_id = ANY($1::text[]) AND r.state = 'pending' AND p.watermark_ts >= r.window_to
      ORDER BY r.requested_at`,
    [unitIds],
  );
  return rows.map(requestFromRow);
}

/** Marks a request done: the version made, or the reason none was. */
export async function finishBaselineRequest(q: Queryable, id: string, result: { version: number } | { error: string }): Promise<void> {
  await q.query(
    `UPDATE baseline_requests SET state = $2, version = $3, error = $4, finished_at = now() WHERE id = $1 AND state = 'pending'`,
    'version' in result ? [id, 'fitted', result.version, null] : [id, 'failed', null, result.error],
  );
}

/** The unit's analysis watermark (ms), or null when nothing is analysed yet. */
export async function analysisWatermarkMs(q: Queryable, unitId: string): Promise<number | null> {
  const { rows } = await q.query(`SELECT (extract(epoch from watermark_ts) * 1000)::float8 AS t FROM analysis_progress WHERE unit_id = $1`, [unitId]);
  return rows.length && rows[0].t !== null ? Number(rows[0].t) : null;
}
