/**
 * How far analysis has come per unit (analysis_progress, analysis_batches): the unit's row
 * locked under this worker's lease, its watermark and counters advanced and its batch logged in
 * the caller's transaction (so the watermark and the analysis it covers commit together or not
 * at all), late rings found and their search moved on, and the totals tests and benchmarks read.
 */
import type pg from 'pg';
import { isoMicros } from './pg-binary.ts';
import { msOf } from './sql.ts';

type Queryable = pg.Pool | pg.ClientBase;

export interface UnitProgress {
  watermarkMs: number | null;
  /** Stored rollups hold the in-order analysis up to this ring time (-Infinity: none). */
  rollupsToMs: number;
  lateCheckedFromMs: number;
  ringsAnalysed: number;
  lateRingsAnalysed: number;
  /** A re-analysis asked from this ring time on, not begun yet (null: none). */
  reanalyseFromMs: number | null;
  /** While rings are judged again: the watermark when it began (rings up to it are re-run). */
  reanalysisToMs: number | null;
}

/** rollups_to in ms (NULL for -infinity, which extract() cannot turn into a finite number). */
const RU_MS = (t: string) => `CASE WHEN ${t}.rollups_to = '-infinity' THEN NULL ELSE ${msOf(`${t}.rollups_to`)} END AS ru_ms`;

const rollupsMs = (v: unknown) => (v === null || v === undefined ? -Infinity : Number(v));
const msOrNull = (v: unknown) => (v === null || v === undefined ? null : Number(v));

/** The columns of analysis_progress `t` that make a UnitProgress (progressOf). */
const PROGRESS_COLUMNS = (t: string) =>
  `${msOf(`${t}.watermark_ts`)} AS wm_ms, ${RU_MS(t)}, ${msOf(`${t}.late_checked_from`)} AS late_ms, ${t}.rings_analysed, ${t}.late_rings_analysed,
   ${msOf(`${t}.reanalyse_from`)} AS rf_ms, ${msOf(`${t}.reanalysis_to`)} AS rt_ms`;

function progressOf(r: Record<string, unknown>): UnitProgress {
  return {
    watermarkMs: msOrNull(r.wm_ms),
    rollupsToMs: rollupsMs(r.ru_ms),
    lateCheckedFromMs: Number(r.late_ms),
    ringsAnalysed: Number(r.rings_analysed),
    lateRingsAnalysed: Number(r.late_rings_analysed),
    reanalyseFromMs: msOrNull(r.rf_ms),
    reanalysisToMs: msOrNull(r.rt_ms),
  };
}

/**
 * Inside the caller's transaction: locks the unit's claim row if this worker holds a live
 * lease on it and returns the unit's progress; null when the lease is not (or no longer) ours.
 */
export async function lockOwnedUnit(client: pg.ClientBase, unitId: string, workerId: string): Promise<UnitProgress | null> {
  const { rows } = await client.query(
    `SELECT ${PROGRESS_COLUMNS('p')}
       FROM unit_claims c JOIN analysis_progress p USING (unit_id)
      WHERE c.unit_id = $1 AND c.worker_id = $2 AND c.lease_until > now()
      FOR UPDATE OF c`,
    [unitId, workerId],
  );
  return rows.length ? progressOf(rows[0]) : null;
}

/**
 * lockOwnedUnit for several units in one statement (rows locked in unit order); a unit is
 * missing from the result when this worker does not hold it, or workerId is null and it has
 * no progress row (then no lease is checked). With leaseS, a lease of a unit locked that has
 * less than two thirds of leaseS left is extended to leaseS from now (a unit being analysed keeps its
 * lease even when the renewal skips its locked row).
 */
export async function lockUnits(client: pg.ClientBase, unitIds: string[], workerId: string | null, leaseS = 0): Promise<Map<string, UnitProgress>> {
  const { rows } =
    workerId === null
      ? await client.query(
          `SELECT p.unit_id, ${PROGRESS_COLUMNS('p')}
             FROM analysis_progress p WHERE p.unit_id = ANY($1::text[]) ORDER BY p.unit_id FOR UPDATE`,
          [unitIds],
        )
      : await client.query(
          `WITH l AS (SELECT c.unit_id FROM unit_claims c JOIN analysis_progress p USING (unit_id)
                       WHERE c.unit_id = ANY($1::text[]) AND c.worker_id = $2 AND c.lease_until > now()
                       ORDER BY c.unit_id FOR UPDATE OF c),
                e AS (UPDATE unit_claims c SET lease_until = greatest(c.lease_until, now() + make_interval(secs => $3))
                        FROM l WHERE c.unit_id = l.unit_id AND $3 > 0 AND c.lease_until < now() + make_interval(secs => $3 * 2 / 3.0) RETURNING c.unit_id)
           SELECT p.unit_id, ${PROGRESS_COLUMNS('p')}
             FROM l JOIN analysis_progress p USING (unit_id) ORDER BY p.unit_id`,
          [unitIds, workerId, leaseS],
        );
  const out = new Map<string, UnitProgress>();
  for (const r of rows) out.set(r.unit_id, progressOf(r));
  return out;
}

/** Inside the caller's transaction: locks the unit's progress row without a lease check (tools and tests). */
export async function lockProgress(client: pg.ClientBase, unitId: string): Promise<UnitProgress | null> {
  const { rows } = await client.query(
    `SELECT ${PROGRESS_COLUMNS('analysis_progress')}
       FROM analysis_progress WHERE unit_id = $1 FOR UPDATE`,
    [unitId],
  );
  return rows.length ? progressOf(rows[0]) : null;
}

/** Stored rings of a unit in [fromMs, toMs] that have no analysis yet. */
export async function countUnanalysed(client: Queryable, unitId: string, fromMs: number, toMs: number): Promise<number> {
  const { rows } = await client.query(
    `SELECT count(*)::int AS n FROM rings r WHERE r.unit_id = $1 AND r.ts >= $2 AND r.ts <= $3
        AND NOT EXISTS (SELECT 1 FROM ring_analysis a WHERE a.unit_id = r.unit_id AND a.ts = r.ts)`,
    [unitId, isoMicros(fromMs), isoMicros(toMs)],
  );
  return rows[0].n as number;
}

/** Advances the watermark (never backwards) and the counters. */
export async function advanceProgress(client: pg.ClientBase, unitId: string, watermarkMs: number | null, inOrder: number, late: number): Promise<void> {
  await client.query(
    `UPDATE analysis_progress
        SET watermark_ts = CASE WHEN $2::timestamptz IS NULL THEN watermark_ts ELSE greatest(coalesce(watermark_ts, '-infinity'), $2::timestamptz) END,
            rings_analysed = rings_analysed + $3, late_rings_analysed = late_rings_analysed + $4, updated_at = now()
      WHERE unit_id = $1`,
    [unitId, watermarkMs === null ? null : isoMicros(watermarkMs), inOrder, late],
  );
}

/**
 * For several units at once: advances each watermark, adds its in-order rings, logs its batch,
 * and moves rollups_to forward to rollupsToMs where given (the batch's rollups were written).
 */
export async function recordInOrderBatches(
  client: pg.ClientBase,
  workerId: string,
  batches: { unitId: string; fromMs: number; toMs: number; rings: number; rollupsToMs?: number | null; rerun?: boolean }[],
): Promise<void> {
  if (batches.length === 0) return;
  const ids = batches.map((b) => b.unitId);
  const from = batches.map((b) => isoMicros(b.fromMs));
  const to = batches.map((b) => isoMicros(b.toMs));
  const n = batches.map((b) => b.rings);
  const ru = batches.map((b) => (b.rollupsToMs === undefined || b.rollupsToMs === null ? null : isoMicros(b.rollupsToMs)));
  const rerun = batches.map((b) => b.rerun === true);
  // A re-run batch (rings judged again) moves the watermark but is not counted again as analysed.
  await client.query(
    `WITH b AS (SELECT * FROM unnest($1::text[], $2::timestamptz[], $3::timestamptz[], $4::int[], $6::timestamptz[], $7::boolean[]) AS b(unit_id, from_ts, to_ts, rings, rollups_to, rerun)),
          p AS (UPDATE analysis_progress p
                   SET watermark_ts = greatest(coalesce(p.watermark_ts, '-infinity'), b.to_ts),
                       rings_analysed = p.rings_analysed + CASE WHEN b.rerun THEN 0 ELSE b.rings END, updated_at = now(),
                       rollups_to = CASE WHEN b.rollups_to IS NULL THEN p.rollups_to ELSE greatest(p.rollups_to, b.rollups_to) END
                  FROM b WHERE p.unit_id = b.unit_id)
     INSERT INTO analysis_batches (unit_id, worker_id, kind, from_ts, to_ts, rings)
     SELECT unit_id, $5, CASE WHEN rerun THEN 'rerun' ELSE 'in_order' END, from_ts, to_ts, rings FROM b`,
    [ids, from, to, n, workerId, ru, rerun],
  );
}

/** Moves rollups_to of these units forward (their rollups were written up to then). */
export async function setRollupsTo(client: pg.ClientBase, entries: { unitId: string; toMs: number }[]): Promise<void> {
  if (entries.length === 0) return;
  await client.query(
    `UPDATE analysis_progress p SET rollups_to = greatest(p.rollups_to, e.t) FROM unnest($1::text[], $2::timestamptz[]) AS e(unit_id, t) WHERE p.unit_id = e.unit_id`,
    [entries.map((e) => e.unitId), entries.map((e) => isoMicros(e.toMs))],
  );
}

export async function logBatch(client: pg.ClientBase, b: { unitId: string; workerId: string; kind: 'in_order' | 'late' | 'rerun'; fromMs: number; toMs: number; rings: number }): Promise<void> {
  await client.query(`INSERT INTO analysis_batches (unit_id, worker_id, kind, from_ts, to_ts, rings) VALUES ($1, $2, $3, $4, $5, $6)`, [
    b.unitId,
    b.workerId,
    b.kind,
    isoMicros(b.fromMs),
    isoMicros(b.toMs),
    b.rings,
  ]);
}

/**
 * The instant before which every ring transaction has finished: the start of the oldest open
 * transaction on this database (a ring's received_at is its transaction's start), or now.
 * Read before searching, so rings that commit later are received at or after it.
 */
export async function receivedHorizon(q: Queryable): Promise<Date> {
  const { rows } = await q.query(
    `SELECT least(clock_timestamp(), (SELECT min(xact_start) FROM pg_stat_activity WHERE datname = current_database() AND xact_start IS NOT NULL AND pid <> pg_backend_pid())) AS h`,
  );
  return rows[0].h as Date;
}

/** Makes sure every unit has a progress row; late_checked_from starts at horizon. */
export async function ensureProgressRows(q: Queryable, unitIds: string[], horizon: Date): Promise<void> {
  if (unitIds.length === 0) return;
  await q.query(
    `INSERT INTO analysis_progress (unit_id, late_checked_from) SELECT u, $2 FROM unnest($1::text[]) AS u
       WHERE EXISTS (SELECT 1 FROM units WHERE id = u) ON CONFLICT (unit_id) DO NOTHING`,
    [unitIds, horizon],
  );
}

/** Late rings of one unit (see findLateRings). */
export interface LateRings {
  /** Ring times, in order. */
  times: number[];
  /** Some of them were taken below `belowSpeedPct` of shaft speed: a start, a run-down or a trip. */
  belowSpeed: boolean;
}

/**
 * Late rings: stored rings of the given units, received at or after the unit's
 * late_checked_from, at or before its watermark, without analysis. Per unit, their times
 * (oldest first, at most perUnitLimit) and whether any of them was taken below belowSpeedPct
 * of shaft speed.
 */
export async function findLateRings(q: Queryable, unitIds: string[], perUnitLimit: number, belowSpeedPct: number): Promise<Map<string, LateRings>> {
  const out = new Map<string, LateRings>();
  if (unitIds.length === 0) return out;
  const { rows } = await q.query(
    `WITH u AS (SELECT unit_id, late_checked_from AS since, watermark_ts AS wm FROM analysis_progress
                 WHERE unit_id = ANY($1::text[]) AND watermark_ts IS NOT NULL),
          lo AS (SELECT min(since) AS since FROM u)
     SELECT r.unit_id, array_agg(${msOf('r.ts')} ORDER BY r.ts) AS ts, bool_or(r.speed_pct < $2) AS below
       FROM rings r JOIN u ON u.unit_id = r.unit_id
      WHERE r.received_at >= (SELECT since FROM lo) AND r.received_at >= u.since AND r.ts <= u.wm
        AND NOT EXISTS (SELECT 1 FROM ring_analysis a WHERE a.unit_id = r.unit_id AND a.ts = r.ts)
      GROUP BY r.unit_id`,
    [unitIds, belowSpeedPct],
  );
  for (const r of rows) {
    const ts = (r.ts as (string | number)[]).map(Number);
    out.set(r.unit_id, { times: ts.slice(0, perUnitLimit), belowSpeed: r.below === true });
  }
  return out;
}

/**
 * Moves the late search start of these units forward to horizon. Progress rows locked this
 * instant (a round is committing that unit) are skipped, not waited for: they keep their older
 * start and are searched again at the next sweep, which finds nothing new there. Waiting made
 * the sweep hold the rows it had already updated while rounds waited for them: lock waits of
 * seconds and deadlocks with the rounds.
 */
export async function setLateCheckedFrom(q: Queryable, unitIds: string[], horizon: Date): Promise<void> {
  if (unitIds.length === 0) return;
  await q.query(
    `WITH l AS (SELECT unit_id FROM analysis_progress WHERE unit_id = ANY($1::text[]) AND late_checked_from < $2 ORDER BY unit_id FOR UPDATE SKIP LOCKED)
     UPDATE analysis_progress p SET late_checked_from = $2 FROM l WHERE p.unit_id = l.unit_id`,
    [unitIds, horizon],
  );
}

export interface AnalysisProgressInfo {
  lastRingTs: Date | null;
  ringsStored: number;
  ringsAnalysed: number;
  watermarkTs: Date | null;
  ringsAnalysedInOrder: number;
  lateRingsAnalysed: number;
  workerId: string | null;
  leaseUntil: Date | null;
  /**
   * Rings being judged again (a baseline or configuration version took effect in the past):
   * from and to what ring time, how many are left; askedFromTs: one asked for and not begun.
   */
  reanalysis?: { fromTs: Date | null; toTs: Date | null; ringsLeft: number; askedFromTs: Date | null } | null;
}

/** How far analysis has come for a unit: rings analysed (the worker's counters) and stored (analysed plus the backlog past the watermark), the watermark, the claim. */
export async function analysisProgress(q: Queryable, unitId: string): Promise<AnalysisProgressInfo> {
  const { rows } = await q.query({
    // Counting every stored ring of a unit would cost a scan of its whole history on each call;
    // the worker's counters give what was analysed, and only the backlog past the watermark is
    // counted (an index range scan that is empty once the unit is caught up).
    name: 'analysis_progress',
    text: `SELECT (SELECT max(ts) FROM rings WHERE unit_id = $1) AS last_ring_ts,
            (SELECT count(*) FROM rings WHERE unit_id = $1 AND ts > coalesce(p.watermark_ts, '-infinity'))::bigint AS pending,
            coalesce(p.rings_analysed, 0) + coalesce(p.late_rings_analysed, 0) AS analysed,
            p.watermark_ts, p.rings_analysed, p.late_rings_analysed, c.worker_id, c.lease_until
       FROM (SELECT 1) one
       LEFT JOIN analysis_progress p ON p.unit_id = $1
       LEFT JOIN unit_claims c ON c.unit_id = $1`,
    values: [unitId],
  });
  const r = rows[0];
  const leaseOk = r.lease_until instanceof Date && Number.isFinite(r.lease_until.getTime());
  return {
    lastRingTs: r.last_ring_ts ?? null,
    ringsStored: Number(r.analysed) + Number(r.pending),
    ringsAnalysed: Number(r.analysed),
    watermarkTs: r.watermark_ts ?? null,
    ringsAnalysedInOrder: Number(r.rings_analysed ?? 0),
    lateRingsAnalysed: Number(r.late_rings_analysed ?? 0),
    workerId: r.worker_id ?? null,
    leaseUntil: leaseOk ? r.lease_until : null,
  };
}

/** Per unit: rings analysed by the worker's counters (in order and late) and the watermark, ms (null before the first). Cheap to poll. */
export async function unitsAnalysed(q: Queryable, unitIds: readonly string[]): Promise<{ unitId: string; ringsAnalysed: number; watermarkMs: number | null }[]> {
  const { rows } = await q.query(
    `SELECT unit_id, (rings_analysed + late_rings_analysed)::bigint AS n, watermark_ts FROM analysis_progress WHERE unit_id = ANY($1) ORDER BY unit_id`,
    [unitIds],
  );
  return rows.map((r: { unit_id: string; n: string; watermark_ts: Date | null }) => ({ unitId: r.unit_id, ringsAnalysed: Number(r.n), watermarkMs: r.watermark_ts ? r.watermark_ts.getTime() : null }));
}

/** Rings analysed over all units by the worker's counters (in order and late): cheap to poll. */
export async function ringsAnalysedTotal(q: Queryable): Promise<number> {
  const { rows } = await q.query(`SELECT coalesce(sum(rings_analysed + late_rings_analysed), 0)::bigint AS n FROM analysis_progress`);
  return Number(rows[0].n);
}

/** Total rings stored and analysed, and committed in-order batch rings, over all units (for tests and benchmarks). */
export async function analysisTotals(q: Queryable): Promise<{ stored: number; analysed: number; inOrderBatchRings: number; lateBatchRings: number; inOrderProgress: number }> {
  const { rows } = await q.query(
    `SELECT (SELECT count(*) FROM rings)::bigint AS stored, (SELECT count(*) FROM ring_analysis)::bigint AS analysed,
            (SELECT coalesce(sum(rings), 0) FROM analysis_batches WHERE kind = 'in_order')::bigint AS in_order,
            (SELECT coalesce(sum(rings), 0) FROM analysis_batches WHERE kind = 'late')::bigint AS late,
            (SELECT coalesce(sum(rings_analysed), 0) FROM analysis_progress)::bigint AS progress`,
  );
  const r = rows[0];
  return { stored: Number(r.stored), analysed: Number(r.analysed), inOrderBatchRings: Number(r.in_order), lateBatchRings: Number(r.late), inOrderProgress: Number(r.progress) };
}

/**
 * Asks for the unit's rings from ring time fromMs on to be judged again, when analysis has
 * already passed it (a baseline or configuration version taking effect in the past). The
 * worker's next round for the unit starts the re-analysis; the earliest time asked wins.
 */
export async function requestReanalysis(q: Queryable, unitId: string, fromMs: number): Promise<boolean> {
  const { rowCount } = await q.query(
    `UPDATE analysis_progress SET reanalyse_from = least(coalesce(reanalyse_from, 'infinity'), $2::timestamptz)
      WHERE unit_id = $1 AND watermark_ts >= $2::timestamptz`,
    [unitId, isoMicros(fromMs)],
  );
  return (rowCount ?? 0) > 0;
}
