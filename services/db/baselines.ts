/**
 * Baselines repository: versioned baselines against corrected load. Versions are numbered per
 * unit from 1 and never changed once written. A version judges the rings from its effective
 * time on (the end of its window): the one in force at a ring's time is the highest version
 * whose effective time is at or before it. A version that takes effect before the unit's
 * analysis watermark asks for the rings after that time to be judged again (requestReanalysis).
 */
import type pg from 'pg';
import { loadBinCount, parseBaseline, type BaselineOptions, type UnitBaseline, type WindowSupply } from '../core/baseline.ts';
import { isoMicros } from './pg-binary.ts';
import type { PeriodEvent } from '../core/baseline-periods.ts';
import { requestReanalysis } from './progress.ts';

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
  /** The ring time from which this version judges the rings (its window's end). */
  effectiveFrom: Date;
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
    effectiveFrom: r.effective_from as Date,
    baseline: parseBaseline(JSON.stringify(r.body)),
  };
}

/** The newest baseline version number of a unit (0 when none). */
export async function latestBaselineVersion(q: Queryable, unitId: string): Promise<number> {
  const { rows } = await q.query(`SELECT coalesce(max(version), 0) AS v FROM baselines WHERE unit_id = $1`, [unitId]);
  return rows[0].v as number;
}

/** The newest baseline version (the one in force from the newest ring on), or null. */
export async function latestBaseline(q: Queryable, unitId: string): Promise<BaselineRecord | null> {
  const { rows } = await q.query(`SELECT * FROM baselines WHERE unit_id = $1 ORDER BY version DESC LIMIT 1`, [unitId]);
  return rows.length ? fromRow(rows[0]) : null;
}

/** The baseline in force at ring time atMs: the highest version effective at or before it, or null. */
export async function baselineInForce(q: Queryable, unitId: string, atMs: number): Promise<BaselineRecord | null> {
  const { rows } = await q.query(`SELECT * FROM baselines WHERE unit_id = $1 AND effective_from <= $2 ORDER BY version DESC LIMIT 1`, [unitId, isoMicros(atMs)]);
  return rows.length ? fromRow(rows[0]) : null;
}

/** Of versions oldest first, the one in force at atMs (see baselineInForce), and the next ring time at which another takes over (Infinity: none). */
export function inForceAt<T extends { version: number; effectiveFrom: Date }>(versions: readonly T[], atMs: number): { current: T | null; untilMs: number } {
  let current: T | null = null;
  for (const v of versions) if (v.effectiveFrom.getTime() <= atMs && (!current || v.version > current.version)) current = v;
  let untilMs = Infinity;
  for (const v of versions) {
    const e = v.effectiveFrom.getTime();
    if (e > atMs && (!current || v.version > current.version)) untilMs = Math.min(untilMs, e);
  }
  return { current, untilMs };
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
    `INSERT INTO baselines (unit_id, version, window_from, window_to, method, fitted_at, fitted_by, sample_count, body, effective_from)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $4) RETURNING *`,
    [unitId, version, b.window.from, b.window.to, b.method, b.fittedAt, b.fittedBy, b.sampleCount, JSON.stringify(b)],
  );
  if (requestId !== undefined) {
    await client.query(`UPDATE baseline_requests SET state = 'fitted', version = $2, finished_at = now() WHERE id = $1`, [requestId, version]);
  }
  const record = fromRow(rows[0]);
  // Rings after the window already judged without this version are judged again with it.
  await requestReanalysis(client, unitId, record.effectiveFrom.getTime());
  return record;
}

/** Time of the first steady analysed ring of a unit (ms), up to ring time uptoMs (the watermark: analysis after it is not current), or null. */
export async function firstSteadyMs(q: Queryable, unitId: string, uptoMs = Infinity): Promise<number | null> {
  const { rows } = await q.query(
    `SELECT (extract(epoch from ts) * 1000)::float8 AS t FROM ring_analysis WHERE unit_id = $1 AND steady AND ts <= $2::timestamptz ORDER BY ts LIMIT 1`,
    [unitId, Number.isFinite(uptoMs) ? isoMicros(uptoMs) : 'infinity'],
  );
  return rows.length ? Number(rows[0].t) : null;
}

/**
 * The steady analysed rings of a unit in [fromMs, toMs), and how many of them the fullest load
 * bin holds, binned as fitBinnedBaseline bins a spread baseline (rings without a spread or a
 * load left out of the bins): what a fit over that window would have, read without reading
 * the rings.
 */
export async function steadyWindowSupply(q: Queryable, unitId: string, fromMs: number, toMs: number, options: BaselineOptions): Promise<WindowSupply> {
  const { rows } = await q.query(
    `SELECT coalesce(sum(n), 0)::int AS total, coalesce(max(n) FILTER (WHERE bin >= 0 AND bin < $6 AND binned), 0)::int AS fullest
       FROM (SELECT floor((load_fraction::float8 - $4::float8) / $5::float8) AS bin, spread IS NOT NULL AS binned, count(*) AS n
               FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3 AND steady
              GROUP BY 1, 2) per_bin`,
    [unitId, isoMicros(fromMs), isoMicros(toMs), options.loadMin, options.binWidth, loadBinCount(options)],
  );
  return { steadyRings: rows[0].total as number, fullestBin: rows[0].fullest as number };
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

/**
 * How a unit's baseline stands, for saying what is not judged yet: its newest version, the
 * ring time of its first steady ring (read only while it has no baseline), and the oldest fit
 * request still waiting. Columns of a query over `units u`; status-reads.ts reads them in its
 * one statement, baselineOutlook below on its own.
 */
export const BASELINE_OUTLOOK_COLUMNS = `
       (SELECT max(version) FROM baselines WHERE unit_id = u.id) AS bo_version,
       (SELECT ts FROM ring_analysis WHERE unit_id = u.id AND steady AND NOT EXISTS (SELECT 1 FROM baselines WHERE unit_id = u.id) ORDER BY ts LIMIT 1) AS bo_first_steady,
       (SELECT ARRAY[window_from, window_to] FROM baseline_requests WHERE unit_id = u.id AND state = 'pending' ORDER BY requested_at, id LIMIT 1) AS bo_pending,
       (SELECT window_from FROM baselines WHERE unit_id = u.id AND effective_from <= coalesce(p.watermark_ts, '-infinity') ORDER BY version DESC LIMIT 1) AS bo_in_force_from,
       (SELECT jsonb_agg(jsonb_build_object('kind', kind, 'atMs', (extract(epoch from at) * 1000)::float8, 'chambers', chambers) ORDER BY at)
          FROM maintenance_events WHERE unit_id = u.id AND kind IN ('nozzles_worked', 'combustion_inspection', 'combustor_tuning') AND at <= coalesce(p.watermark_ts, '-infinity')) AS bo_periods`;

export interface BaselineOutlook {
  version: number | null;
  firstSteadyMs: number | null;
  pendingRequest: { fromMs: number; toMs: number } | null;
  /** Start of the reference window of the baseline in force at the watermark, or null. */
  inForceFromMs: number | null;
  /** Maintenance that starts a new baseline period, up to the watermark, oldest first. */
  periods: PeriodEvent[];
}

export function baselineOutlookOf(r: Record<string, unknown>): BaselineOutlook {
  const pending = r.bo_pending as Date[] | null;
  return {
    version: r.bo_version === null || r.bo_version === undefined ? null : Number(r.bo_version),
    firstSteadyMs: r.bo_first_steady instanceof Date ? r.bo_first_steady.getTime() : null,
    pendingRequest: pending ? { fromMs: pending[0].getTime(), toMs: pending[1].getTime() } : null,
    inForceFromMs: r.bo_in_force_from instanceof Date ? r.bo_in_force_from.getTime() : null,
    periods: ((r.bo_periods as PeriodEvent[] | null) ?? []).map((e) => ({ kind: e.kind, atMs: Number(e.atMs), chambers: e.chambers ?? null })),
  };
}

/** The baseline outlook and analysis progress of one unit (null when there is no such unit). */
export async function baselineOutlook(q: Queryable, unitId: string): Promise<(BaselineOutlook & { ringsStored: number; ringsAnalysed: number; watermarkMs: number | null }) | null> {
  const { rows } = await q.query(
    `SELECT ${BASELINE_OUTLOOK_COLUMNS},
            p.watermark_ts, coalesce(p.rings_analysed, 0) + coalesce(p.late_rings_analysed, 0) AS analysed,
            (SELECT count(*) FROM rings WHERE unit_id = u.id AND ts > coalesce(p.watermark_ts, '-infinity'))::bigint AS pending
       FROM units u LEFT JOIN analysis_progress p ON p.unit_id = u.id
      WHERE u.id = $1`,
    [unitId],
  );
  if (!rows.length) return null;
  const r = rows[0];
  const analysed = Number(r.analysed);
  return { ...baselineOutlookOf(r), ringsAnalysed: analysed, ringsStored: analysed + Number(r.pending), watermarkMs: r.watermark_ts instanceof Date ? r.watermark_ts.getTime() : null };
}
