/**
 * Drift repository: daily robust aggregates of residuals on steady rings (computed in
 * PostgreSQL from ring_analysis, one statement per unit and span of days) and the persisted
 * drift state per chamber and thermocouple (rate with interval, CUSUM, EWMA).
 */
import type pg from 'pg';
import type { CusumState, DriftRate, EwmaState } from '../core/drift.ts';

type Queryable = pg.Pool | pg.ClientBase;
export type DriftSubject = 'chamber' | 'thermocouple';

/**
 * Computes and stores drift_daily rows for days [fromDay, toDay) (UTC dates as 'YYYY-MM-DD')
 * from steady rings analysed against baseline `version`: per chamber and thermocouple the
 * count, median, MAD and mean of the residuals, and the unit's fired hours that day (minutes
 * with a ring above 2 % corrected load). Re-running a day replaces its rows.
 */
export async function computeDailyResiduals(q: Queryable, unitId: string, fromDay: string, toDay: string, version: number): Promise<number> {
  const { rowCount } = await q.query(
    `WITH a AS (
       SELECT ts, (ts AT TIME ZONE 'UTC')::date AS day, steady, baseline_version, load_fraction, chamber_residual, tc_residual
         FROM ring_analysis
        WHERE unit_id = $1 AND ts >= ($2::date AT TIME ZONE 'UTC') AND ts < ($3::date AT TIME ZONE 'UTC')),
     fired AS (
       SELECT day, count(DISTINCT date_trunc('minute', ts)) FILTER (WHERE load_fraction > 0.02) / 60.0 AS hours FROM a GROUP BY day),
     x AS (
       SELECT a.day, 'chamber'::text AS subject, u.idx::smallint AS idx, u.r
         FROM a, unnest(a.chamber_residual) WITH ORDINALITY AS u(r, idx)
        WHERE a.steady AND a.baseline_version = $4 AND u.r IS NOT NULL
       UNION ALL
       SELECT a.day, 'thermocouple', u.idx::smallint, u.r
         FROM a, unnest(a.tc_residual) WITH ORDINALITY AS u(r, idx)
        WHERE a.steady AND a.baseline_version = $4 AND u.r IS NOT NULL),
     med AS (
       SELECT day, subject, idx, count(*)::int AS n, percentile_cont(0.5) WITHIN GROUP (ORDER BY r) AS median, avg(r) AS mean
         FROM x GROUP BY day, subject, idx),
     mad AS (
       SELECT x.day, x.subject, x.idx, percentile_cont(0.5) WITHIN GROUP (ORDER BY abs(x.r - m.median)) AS mad
         FROM x JOIN med m USING (day, subject, idx) GROUP BY x.day, x.subject, x.idx)
     INSERT INTO drift_daily (unit_id, subject, idx, day, baseline_version, n, median, mad, mean, fired_hours)
     SELECT $1, m.subject, m.idx, m.day, $4, m.n, m.median, d.mad, m.mean, coalesce(f.hours, 0)
       FROM med m JOIN mad d USING (day, subject, idx) LEFT JOIN fired f USING (day)
     ON CONFLICT (unit_id, subject, idx, day) DO UPDATE
       SET baseline_version = excluded.baseline_version, n = excluded.n, median = excluded.median,
           mad = excluded.mad, mean = excluded.mean, fired_hours = excluded.fired_hours`,
    [unitId, fromDay, toDay, version],
  );
  return rowCount ?? 0;
}

export interface DailyResidual {
  subject: DriftSubject;
  idx: number;
  day: string;
  n: number;
  median: number;
  mad: number;
  mean: number;
  firedHours: number;
}

/** Daily aggregates against one baseline version with fromDay ≤ day < toDay, oldest first. */
export async function readDailyResiduals(q: Queryable, unitId: string, version: number, fromDay: string, toDay: string): Promise<DailyResidual[]> {
  const { rows } = await q.query(
    `SELECT subject, idx, to_char(day, 'YYYY-MM-DD') AS day, n, median, mad, mean, fired_hours FROM drift_daily
      WHERE unit_id = $1 AND baseline_version = $2 AND day >= $3::date AND day < $4::date ORDER BY day, subject, idx`,
    [unitId, version, fromDay, toDay],
  );
  return rows.map((r) => ({ subject: r.subject, idx: r.idx, day: r.day, n: r.n, median: r.median, mad: r.mad, mean: r.mean, firedHours: r.fired_hours }));
}

export interface DriftStateRecord {
  subject: DriftSubject;
  idx: number;
  baselineVersion: number;
  lastDay: string;
  sigma: number;
  days: number;
  rate: DriftRate | null;
  cusum: CusumState;
  ewma: EwmaState;
  lastValue: number | null;
  updatedAt?: Date;
}

export async function readDriftStates(q: Queryable, unitId: string): Promise<DriftStateRecord[]> {
  const { rows } = await q.query(
    `SELECT subject, idx, baseline_version, to_char(last_day, 'YYYY-MM-DD') AS last_day, sigma, days, rate, cusum, ewma, last_value, updated_at
       FROM drift_state WHERE unit_id = $1 ORDER BY subject, idx`,
    [unitId],
  );
  return rows.map((r) => ({
    subject: r.subject,
    idx: r.idx,
    baselineVersion: r.baseline_version,
    lastDay: r.last_day,
    sigma: r.sigma,
    days: r.days,
    rate: r.rate,
    cusum: r.cusum,
    ewma: r.ewma,
    lastValue: r.last_value,
    updatedAt: r.updated_at,
  }));
}

/** Replaces the drift state of a unit with these rows. */
export async function writeDriftStates(q: Queryable, unitId: string, states: DriftStateRecord[]): Promise<void> {
  await q.query(`DELETE FROM drift_state WHERE unit_id = $1`, [unitId]);
  if (states.length === 0) return;
  await q.query(
    `INSERT INTO drift_state (unit_id, subject, idx, baseline_version, last_day, sigma, days, rate, cusum, ewma, last_value)
     SELECT $1, x.subject, x.idx, x.baseline_version, x.last_day, x.sigma, x.days, x.rate, x.cusum, x.ewma, x.last_value
       FROM jsonb_to_recordset($2::jsonb) AS x(subject text, idx smallint, baseline_version integer, last_day date, sigma real, days integer, rate jsonb, cusum jsonb, ewma jsonb, last_value real)`,
    [
      unitId,
      JSON.stringify(
        states.map((s) => ({
          subject: s.subject,
          idx: s.idx,
          baseline_version: s.baselineVersion,
          last_day: s.lastDay,
          sigma: s.sigma,
          days: s.days,
          rate: s.rate,
          cusum: s.cusum,
          ewma: s.ewma,
          last_value: s.lastValue !== null && Number.isFinite(s.lastValue) ? s.lastValue : null,
        })),
      ),
    ],
  );
}

/** When the drift state of a unit last changed (null: never), to know when to reload it. */
export async function driftStateStamp(q: Queryable, unitId: string): Promise<number | null> {
  const { rows } = await q.query(`SELECT (extract(epoch from max(updated_at)) * 1000)::float8 AS t FROM drift_state WHERE unit_id = $1`, [unitId]);
  return rows[0].t === null ? null : Number(rows[0].t);
}
