/**
 * Rollups repository: hourly and daily aggregates per unit and metric, read and written whole
 * (the worker merges): by bucket, of several units at once, over a window; written by upsert or,
 * for rows not stored yet, by one binary COPY.
 */
import type pg from 'pg';
import { copyIn, PG_EPOCH_MS } from './pg-binary.ts';

type Queryable = pg.Pool | pg.ClientBase;

export type RollupPeriod = 'hour' | 'day';

/** One rollup row: arrays with one element per subject (index 0 = chamber / thermocouple 1). */
export interface RollupRow {
  period: RollupPeriod;
  metric: string;
  bucketMs: number;
  n: number[];
  sum: number[];
  sumsq: number[];
  min: number[];
  max: number[];
}

function rowFromDb(r: Record<string, unknown>): RollupRow {
  const nums = (a: unknown) => (a as (number | string | null)[]).map((v) => (v === null ? NaN : Number(v)));
  return {
    period: r.period as RollupPeriod,
    metric: r.metric as string,
    bucketMs: (r.bucket as Date).getTime(),
    n: nums(r.n),
    sum: nums(r.sum),
    sumsq: nums(r.sumsq),
    min: nums(r.min),
    max: nums(r.max),
  };
}

/** Rollup rows of a unit for one period and the given bucket starts (any metric). */
export async function readRollupBuckets(q: Queryable, unitId: string, period: RollupPeriod, bucketsMs: number[]): Promise<RollupRow[]> {
  if (bucketsMs.length === 0) return [];
  const { rows } = await q.query(
    `SELECT period, metric, bucket, n, sum, sumsq, min, max FROM analysis_rollups WHERE unit_id = $1 AND period = $2 AND bucket = ANY($3::timestamptz[])`,
    [unitId, period, bucketsMs.map((b) => new Date(b))],
  );
  return rows.map(rowFromDb);
}

/**
 * Stored rollup rows of several units' buckets, each with its unit: of any metric, or of the
 * given metrics only (then each row is one probe of the primary key, instead of a search of
 * the key's metric column within each bucket).
 */
export async function readRollupBucketsMany(
  q: Queryable,
  keys: { unitId: string; period: RollupPeriod; bucketMs: number }[],
  metrics?: readonly string[],
): Promise<{ unitId: string; row: RollupRow }[]> {
  if (keys.length === 0) return [];
  if (metrics) {
    if (metrics.length === 0) return [];
    // Every (key, metric) pair spelled out: the planner then probes the whole primary key.
    const units: string[] = [];
    const periods: string[] = [];
    const names: string[] = [];
    const buckets: Date[] = [];
    for (const k of keys) {
      const bucket = new Date(k.bucketMs);
      for (const metric of metrics) {
        units.push(k.unitId);
        periods.push(k.period);
        names.push(metric);
        buckets.push(bucket);
      }
    }
    const { rows } = await q.query(
      `SELECT r.unit_id, r.period, r.metric, r.bucket, r.n, r.sum, r.sumsq, r.min, r.max
         FROM unnest($1::text[], $2::text[], $3::text[], $4::timestamptz[]) AS k(unit_id, period, metric, bucket)
         JOIN analysis_rollups r ON r.unit_id = k.unit_id AND r.period = k.period AND r.metric = k.metric AND r.bucket = k.bucket`,
      [units, periods, names, buckets],
    );
    return rows.map((r) => ({ unitId: r.unit_id as string, row: rowFromDb(r) }));
  }
  const { rows } = await q.query(
    `SELECT r.unit_id, r.period, r.metric, r.bucket, r.n, r.sum, r.sumsq, r.min, r.max
       FROM unnest($1::text[], $2::text[], $3::timestamptz[]) AS k(unit_id, period, bucket)
       JOIN analysis_rollups r ON r.unit_id = k.unit_id AND r.period = k.period AND r.bucket = k.bucket`,
    [keys.map((k) => k.unitId), keys.map((k) => k.period), keys.map((k) => new Date(k.bucketMs))],
  );
  return rows.map((r) => ({ unitId: r.unit_id as string, row: rowFromDb(r) }));
}

/** Rollup rows of a unit for one period with fromMs ≤ bucket < toMs, optionally one metric, oldest first. */
export async function readRollups(q: Queryable, unitId: string, period: RollupPeriod, fromMs: number, toMs: number, metric?: string): Promise<RollupRow[]> {
  const { rows } = await q.query(
    `SELECT period, metric, bucket, n, sum, sumsq, min, max FROM analysis_rollups
      WHERE unit_id = $1 AND period = $2 AND bucket >= $3 AND bucket < $4 AND ($5::text IS NULL OR metric = $5) ORDER BY bucket, metric`,
    [unitId, period, new Date(fromMs), new Date(toMs), metric ?? null],
  );
  return rows.map(rowFromDb);
}

const finiteOrNull = (v: number) => (Number.isFinite(v) ? v : null);

/** Writes rollup rows whole (insert or replace). */
export async function writeRollups(q: Queryable, unitId: string, rows: RollupRow[]): Promise<void> {
  await writeRollupsMany(
    q,
    rows.map((row) => ({ unitId, row })),
  );
}

/** Writes rollup rows of several units whole (insert or replace), in one statement. */
export async function writeRollupsMany(q: Queryable, rows: { unitId: string; row: RollupRow }[]): Promise<void> {
  if (rows.length === 0) return;
  const payload = JSON.stringify(
    rows.map(({ unitId, row: r }) => ({
      unit_id: unitId,
      period: r.period,
      metric: r.metric,
      bucket: new Date(r.bucketMs).toISOString(),
      n: r.n,
      sum: r.sum.map(finiteOrNull),
      sumsq: r.sumsq.map(finiteOrNull),
      min: r.min.map(finiteOrNull),
      max: r.max.map(finiteOrNull),
    })),
  );
  await q.query(
    `INSERT INTO analysis_rollups (unit_id, period, metric, bucket, n, sum, sumsq, min, max)
     SELECT x.unit_id, x.period, x.metric, x.bucket, x.n, x.sum, x.sumsq, x.min, x.max
       FROM jsonb_to_recordset($1::jsonb) AS x(unit_id text, period text, metric text, bucket timestamptz, n integer[], sum double precision[], sumsq double precision[], min real[], max real[])
     ON CONFLICT (unit_id, period, metric, bucket) DO UPDATE
       SET n = excluded.n, sum = excluded.sum, sumsq = excluded.sumsq, min = excluded.min, max = excluded.max`,
    [payload],
  );
}

/**
 * Inserts rollup rows that are not stored yet with one binary COPY (no JSON, no conflict
 * check; a row that exists after all fails the COPY and with it the transaction).
 */
export async function insertRollupsMany(client: pg.ClientBase, rows: { unitId: string; row: RollupRow }[]): Promise<void> {
  if (rows.length === 0) return;
  await copyIn(client, 'analysis_rollups', 'unit_id, period, metric, bucket, n, sum, sumsq, min, max', encodeRollups(rows));
}

const INT4_OID = 23;

const FLOAT4_OID = 700;

const FLOAT8_OID = 701;

/** Binary COPY body of rollup rows (text ×3, timestamptz, int4[], float8[] ×2, float4[] ×2; non-finite elements NULL). */
function encodeRollups(rows: { unitId: string; row: RollupRow }[]): Buffer {
  let size = 21;
  for (const { unitId, row } of rows) size += 2 + 4 * 9 + Buffer.byteLength(unitId) + row.period.length + Buffer.byteLength(row.metric) + 8 + 5 * 20 + row.n.length * (8 + 12 + 12 + 8 + 8);
  const buf = Buffer.alloc(size);
  const d = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
  buf.write('PGCOPY\n\xff\r\n\0', 0, 'latin1');
  let p = 19;
  const text = (s: string) => {
    const n = buf.write(s, p + 4, 'utf8');
    d.setInt32(p, n);
    p += 4 + n;
  };
  const array = (values: number[], oid: number, width: 4 | 8, int: boolean) => {
    const lenAt = p;
    d.setInt32(p + 4, 1);
    d.setInt32(p + 12, oid);
    d.setInt32(p + 16, values.length);
    d.setInt32(p + 20, 1);
    p += 24;
    let hasNull = 0;
    for (const v of values) {
      if (!Number.isFinite(v)) {
        d.setInt32(p, -1);
        p += 4;
        hasNull = 1;
        continue;
      }
      d.setInt32(p, width);
      if (int) d.setInt32(p + 4, v);
      else if (width === 4) d.setFloat32(p + 4, v);
      else d.setFloat64(p + 4, v);
      p += 4 + width;
    }
    d.setInt32(lenAt + 8, hasNull);
    d.setInt32(lenAt, p - lenAt - 4);
  };
  for (const { unitId, row } of rows) {
    d.setInt16(p, 9);
    p += 2;
    text(unitId);
    text(row.period);
    text(row.metric);
    d.setInt32(p, 8);
    d.setBigInt64(p + 4, BigInt(Math.round(row.bucketMs - PG_EPOCH_MS)) * 1000n);
    p += 12;
    array(row.n, INT4_OID, 4, true);
    array(row.sum, FLOAT8_OID, 8, false);
    array(row.sumsq, FLOAT8_OID, 8, false);
    array(row.min, FLOAT4_OID, 4, false);
    array(row.max, FLOAT4_OID, 4, false);
  }
  d.setInt16(p, -1);
  return buf.subarray(0, p + 2);
}

/** Removes the rollup rows of these buckets (before they are recomputed). */
export async function deleteRollupBuckets(q: Queryable, unitId: string, period: RollupPeriod, bucketsMs: number[]): Promise<void> {
  if (bucketsMs.length === 0) return;
  await q.query(`DELETE FROM analysis_rollups WHERE unit_id = $1 AND period = $2 AND bucket = ANY($3::timestamptz[])`, [unitId, period, bucketsMs.map((b) => new Date(b))]);
}
