/**
 * Synthetic rows for read-path tests and the API benchmark: analysed rings, rollups, a
 * baseline, drift state and alerts, written straight into the worker's tables with plain
 * INSERTs so a reader can be exercised without running the analysis. Never used by the
 * services themselves. The values are made up but shaped like the real ones (numbered from 1,
 * °C, arrays in thermocouple or chamber order).
 */
import type pg from 'pg';

type Queryable = pg.Pool | pg.ClientBase;

export interface SyntheticAnalysis {
  tsMs: number;
  loadFraction: number;
  spreadC: number;
  spreadLimitC: number;
  validity: number[];
  tcDeviationC: (number | null)[];
  tcResidualC?: (number | null)[] | null;
  /** NaN: the chamber is not observable in that ring (stored as null). */
  chamberDeviationC: number[];
  chamberResidualC?: number[] | null;
  swirlDeg: number;
  worstChamber?: number | null;
  worstLikelihood?: number | null;
  baselineVersion?: number | null;
  exhaustC?: (number | null)[];
}

/** Inserts analysed rings (and, when exhaustC is given, the rings themselves). */
export async function insertAnalyses(q: Queryable, unitId: string, rows: SyntheticAnalysis[]): Promise<void> {
  if (rows.length === 0) return;
  const lo = Math.min(...rows.map((r) => r.tsMs));
  const hi = Math.max(...rows.map((r) => r.tsMs));
  await q.query('SELECT ensure_analysis_partitions($1, $2)', [new Date(lo), new Date(hi)]);
  await q.query('SELECT ensure_ring_partitions($1, $2)', [new Date(lo), new Date(hi)]);
  const payload = rows.map((r) => {
    const valid = r.validity.filter((v) => v === 0).length;
    const ordered = r.tcDeviationC.map((d, i) => ({ d, i })).filter((x) => x.d !== null && r.validity[x.i] === 0).sort((a, b) => a.d! - b.d!);
    return {
      ts: new Date(r.tsMs).toISOString(),
      load: r.loadFraction,
      spread: r.spreadC,
      limit: r.spreadLimitC,
      valid,
      degraded: valid < r.validity.length * 0.75,
      validity: r.validity,
      dev: r.tcDeviationC,
      res: r.tcResidualC ?? null,
      swirl: r.swirlDeg,
      chdev: r.chamberDeviationC,
      // A chamber with no estimate (NaN: not observable) has no uncertainty either.
      chunc: r.chamberDeviationC.map((d) => (Number.isFinite(d) ? 1.5 : null)),
      chres: r.chamberResidualC ?? null,
      hottest: ordered.length ? ordered[ordered.length - 1].i + 1 : null,
      coldest: ordered.length ? ordered[0].i + 1 : null,
      worst: r.worstChamber ?? null,
      lik: r.worstLikelihood ?? null,
      bv: r.baselineVersion ?? null,
      exhaust: r.exhaustC ?? null,
    };
  });
  for (let i = 0; i < payload.length; i += 2000) {
    const chunk = JSON.stringify(payload.slice(i, i + 2000));
    await q.query(
      `INSERT INTO ring_analysis (unit_id, ts, config_version, baseline_version, load_fraction, steady, spread, spread_excl1, spread_excl2, spread_limit,
              limit_from_baseline, ring_mean, robust_centre, std_dev, hottest_tc, coldest_tc, second_coldest_tc, coldest_adjacent, valid_count,
              coverage_degraded, validity, tc_deviation, tc_residual, swirl_deg, chamber_deviation, chamber_uncertainty, chamber_residual,
              ring_level, fit_sd, worst_chamber, worst_likelihood, runner_up_chamber, runner_up_likelihood, worst_grade, findings)
       SELECT $1, x.ts, 1, x.bv, x.load, true, x.spread, x.spread * 0.8, x.spread * 0.7, x.limit, x.bv IS NOT NULL, 560, 560, 8, x.hottest, x.coldest,
              NULL, false, x.valid, x.degraded,
              ARRAY(SELECT jsonb_array_elements_text(x.validity)::smallint), ARRAY(SELECT (CASE WHEN e = 'null' THEN NULL ELSE e::text::real END) FROM jsonb_array_elements(x.dev) e),
              CASE WHEN x.res IS NULL OR x.res = 'null' THEN NULL ELSE ARRAY(SELECT (CASE WHEN e = 'null' THEN NULL ELSE e::text::real END) FROM jsonb_array_elements(x.res) e) END,
              x.swirl, ARRAY(SELECT (CASE WHEN e = 'null' THEN NULL ELSE e::text::real END) FROM jsonb_array_elements(x.chdev) e),
              ARRAY(SELECT (CASE WHEN e = 'null' THEN NULL ELSE e::text::real END) FROM jsonb_array_elements(x.chunc) e),
              CASE WHEN x.chres IS NULL OR x.chres = 'null' THEN NULL ELSE ARRAY(SELECT e::text::real FROM jsonb_array_elements(x.chres) e) END,
              560, 2.5, x.worst, x.lik, NULL, NULL, NULL, NULL
         FROM jsonb_to_recordset($2::jsonb) AS x(ts timestamptz, load real, spread real, "limit" real, valid smallint, degraded boolean, validity jsonb, dev jsonb,
              res jsonb, swirl real, chdev jsonb, chunc jsonb, chres jsonb, hottest smallint, coldest smallint, worst smallint, lik real, bv integer, exhaust jsonb)
       ON CONFLICT DO NOTHING`,
      [unitId, chunk],
    );
    await q.query(
      `INSERT INTO rings (unit_id, ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c)
       SELECT $1, x.ts, x.load * 24, 15, 101.3, 100, ARRAY(SELECT (CASE WHEN e = 'null' THEN NULL ELSE e::text::real END) FROM jsonb_array_elements(x.exhaust) e)
         FROM jsonb_to_recordset($2::jsonb) AS x(ts timestamptz, load real, exhaust jsonb) WHERE x.exhaust IS NOT NULL AND x.exhaust <> 'null'
       ON CONFLICT DO NOTHING`,
      [unitId, chunk],
    );
  }
  await q.query(
    `INSERT INTO analysis_progress (unit_id, watermark_ts, late_checked_from) VALUES ($1, $2, $2)
     ON CONFLICT (unit_id) DO UPDATE SET watermark_ts = greatest(analysis_progress.watermark_ts, excluded.watermark_ts)`,
    [unitId, new Date(hi)],
  );
}

export interface SyntheticRollup {
  period: 'hour' | 'day';
  metric: string;
  bucketMs: number;
  /** One value per subject: the bucket's mean; count, spread and extremes are made around it. */
  means: number[];
  n?: number;
  sd?: number;
}

/** Inserts rollup rows whose mean per subject is exactly `means` (count n, standard deviation sd). */
export async function insertRollups(q: Queryable, unitId: string, rows: SyntheticRollup[]): Promise<void> {
  for (let i = 0; i < rows.length; i += 5000) {
    const payload = JSON.stringify(
      rows.slice(i, i + 5000).map((r) => {
        const n = r.n ?? 60;
        const sd = r.sd ?? 1;
        return {
          period: r.period,
          metric: r.metric,
          bucket: new Date(r.bucketMs).toISOString(),
          n: r.means.map(() => n),
          sum: r.means.map((m) => m * n),
          sumsq: r.means.map((m) => n * m * m + (n - 1) * sd * sd),
          min: r.means.map((m) => m - 2 * sd),
          max: r.means.map((m) => m + 2 * sd),
        };
      }),
    );
    await q.query(
      `INSERT INTO analysis_rollups (unit_id, period, metric, bucket, n, sum, sumsq, min, max)
       SELECT $1, x.period, x.metric, x.bucket, x.n, x.sum, x.sumsq, x.min, x.max
         FROM jsonb_to_recordset($2::jsonb) AS x(period text, metric text, bucket timestamptz, n integer[], sum double precision[], sumsq double precision[], min real[], max real[])
       ON CONFLICT (unit_id, period, metric, bucket) DO UPDATE SET n = excluded.n, sum = excluded.sum, sumsq = excluded.sumsq, min = excluded.min, max = excluded.max`,
      [unitId, payload],
    );
  }
}

/** Inserts a baseline version with a minimal body. */
export async function insertBaseline(q: Queryable, unitId: string, version: number, fromMs: number, toMs: number): Promise<void> {
  await q.query(
    `INSERT INTO baselines (unit_id, version, window_from, window_to, method, fitted_at, fitted_by, sample_count, body, effective_from)
     VALUES ($1, $2, $3, $4, 'binned-median-mad', $4, 'synthetic', 1000, '{}'::jsonb, $4) ON CONFLICT DO NOTHING`,
    [unitId, version, new Date(fromMs), new Date(toMs)],
  );
}

export interface SyntheticDrift {
  subject: 'chamber' | 'thermocouple';
  index: number;
  per30DaysC: number;
  intervalC: [number, number];
  sigmaC: number;
  lastValueC: number;
  lastDay: string;
  days: number;
  cusum?: { upper: number; lower: number };
}

export async function insertDriftStates(q: Queryable, unitId: string, baselineVersion: number, rows: SyntheticDrift[]): Promise<void> {
  for (const d of rows) {
    await q.query(
      `INSERT INTO drift_state (unit_id, subject, idx, baseline_version, last_day, sigma, days, rate, cusum, ewma, last_value)
       VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, '{}'::jsonb, $10)
       ON CONFLICT (unit_id, subject, idx) DO UPDATE SET rate = excluded.rate, cusum = excluded.cusum, last_value = excluded.last_value, sigma = excluded.sigma`,
      [
        unitId, d.subject, d.index, baselineVersion, d.lastDay, d.sigmaC, d.days,
        JSON.stringify({ per30DaysDegC: d.per30DaysC, per30DaysInterval: d.intervalC, per1000FiredHoursDegC: null, per1000FiredHoursInterval: null, confidence: 0.95, n: d.days, significant: d.intervalC[0] > 0 || d.intervalC[1] < 0 }),
        JSON.stringify({ k: 0.5, h: 5, upper: d.cusum?.upper ?? 0, lower: d.cusum?.lower ?? 0, count: d.days, upperRun: 0, lowerRun: 0 }),
        d.lastValueC,
      ],
    );
  }
}

export interface SyntheticAlert {
  kind: string;
  grade: 'notice' | 'warning' | 'alarm' | 'critical';
  chamber?: number | null;
  thermocouple?: number | null;
  active?: boolean;
  raisedAtMs: number;
  message: string;
  advice?: string;
}

/** Inserts open alerts (with their "raised" history row); returns their ids. */
export async function insertAlerts(q: Queryable, unitId: string, rows: SyntheticAlert[]): Promise<string[]> {
  const ids: string[] = [];
  for (const a of rows) {
    const key = `${a.kind}:${a.chamber ?? a.thermocouple ?? 'unit'}`;
    const active = a.active ?? true;
    const { rows: made } = await q.query(
      `INSERT INTO alerts (unit_id, kind, condition_key, grade, chamber, thermocouple, active, raised_at, last_changed_at, cleared_at, message, advice, evidence, last_seen_at)
       VALUES ($1, $2, $3, $4, $5, $6, $7::boolean, $8::timestamptz, $8::timestamptz, CASE WHEN $7::boolean THEN NULL ELSE $8::timestamptz END, $9, $10, '{"source":"synthetic"}'::jsonb, $8::timestamptz) RETURNING id`,
      [unitId, a.kind, key, a.grade, a.chamber ?? null, a.thermocouple ?? null, active, new Date(a.raisedAtMs), a.message, a.advice ?? 'Look at it at the next opportunity.'],
    );
    await q.query(`INSERT INTO alert_history (alert_id, unit_id, at, action, grade) VALUES ($1, $2, $3, 'raised', $4)`, [made[0].id, unitId, new Date(a.raisedAtMs), a.grade]);
    ids.push(made[0].id);
  }
  return ids;
}
