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
 * the baseline to store; unit-level advisory lock so two fits of one unit take turns.
 */
export async function insertBaseline(client: pg.ClientBase, unitId: string, build: (version: number) => UnitBaseline): Promise<BaselineRecord> {
  await client.query(`SELECT pg_advisory_xact_lock(hashtext('cansight-baseline:' || $1))`, [unitId]);
  const version = (await latestBaselineVersion(client, unitId)) + 1;
  const b = build(version);
  const { rows } = await client.query(
    `INSERT INTO baselines (unit_id, version, window_from, window_to, method, fitted_at, fitted_by, sample_count, body)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9) RETURNING *`,
    [unitId, version, b.window.from, b.window.to, b.method, b.fittedAt, b.fittedBy, b.sampleCount, JSON.stringify(b)],
  );
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
