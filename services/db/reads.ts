/**
 * Read repository of the read API, the pictures, the dashboard and the pre-outage review: every
 * query those routes make, in one file. It only reads what ingest and the worker wrote (rings,
 * ring_analysis, analysis_rollups, baselines, drift_state, alerts); the only statement that is
 * not a SELECT is none. Windows are bounded by the caller; every query here also carries a LIMIT
 * or a key range so a mistaken call cannot scan history.
 */
import type pg from 'pg';
import type { StartCountersRecord } from './starts.ts';
import { baselineOutlook } from './baselines.ts';
import { listCalls } from './outcomes.ts';
import { unitEvents } from './events.ts';

type Queryable = pg.Pool | pg.ClientBase;

export type Grade = 'notice' | 'warning' | 'alarm' | 'critical';
const GRADE_BY_RANK: Grade[] = ['notice', 'warning', 'alarm', 'critical'];

const num = (v: unknown): number | null => (v === null || v === undefined ? null : Number.isFinite(Number(v)) ? Number(v) : null);
const iso = (v: unknown): string | null => (v instanceof Date ? v.toISOString() : v == null ? null : String(v));
const numArray = (v: unknown): (number | null)[] | null => (Array.isArray(v) ? v.map(num) : null);

// ---------------------------------------------------------------------------------------------
// Fleet.

export interface FleetRecord {
  unitId: string;
  name: string;
  site: string;
  temperatureUnit: 'C' | 'F';
  lastRingTs: string | null;
  lastAnalysisTs: string | null;
  loadFraction: number | null;
  spreadC: number | null;
  spreadLimitC: number | null;
  validCount: number | null;
  thermocoupleCount: number | null;
  worstGrade: Grade | null;
  activeAlerts: number;
  unacknowledged: number;
  shelvedAlerts: number;
}

/** One unit's start counters as the fleet shows them (as the starts repository's counters). */
export interface FleetStarts {
  firedStarts: number;
  failedStarts: number;
  trips: number;
  firedHours: number;
  lastStartAt: string | null;
  lastStartOutcome: StartCountersRecord['lastStartOutcome'];
}

const LAST_RING_WINDOW_MS = 35 * 86_400_000;

/** The fleet at one commit snapshot: its records, start counters, and until when they hold. */
export interface FleetState {
  records: FleetRecord[];
  starts: Map<string, FleetStarts>;
  /** The commit snapshot the rows were read at (see commitSnapshot). */
  snapshot: string;
  /**
   * The next instant at which the same rows would read differently with no write in between
   * (a shelf running out, a configuration version taking effect, a latest ring leaving the
   * five-week window), or null.
   */
  changesAtMs: number | null;
}

/**
 * One row per unit (or per unit of the scope) in one statement: the latest analysed ring (found
 * through the worker's watermark, one primary-key probe), the latest stored ring of the last five
 * weeks, the counts of open active alerts by grade, shelved ones apart, and the start counters;
 * with the commit snapshot it was read at and the next instant the clock alone changes it.
 */
export async function fleetState(q: Queryable, scope: string[] | null, nowMs: number): Promise<FleetState> {
  const { rows } = await q.query({
    name: 'fleet_state',
    text: `WITH u AS (SELECT id, name, site FROM units WHERE $1::text[] IS NULL OR id = ANY($1)),
          a AS (SELECT unit_id,
                       max(CASE grade WHEN 'critical' THEN 3 WHEN 'alarm' THEN 2 WHEN 'warning' THEN 1 ELSE 0 END)
                         FILTER (WHERE shelved_until IS NULL OR shelved_until <= $2) AS worst,
                       count(*) FILTER (WHERE shelved_until IS NULL OR shelved_until <= $2) AS active,
                       count(*) FILTER (WHERE NOT acknowledged AND (shelved_until IS NULL OR shelved_until <= $2)) AS unacked,
                       count(*) FILTER (WHERE shelved_until > $2) AS shelved,
                       min(shelved_until) FILTER (WHERE shelved_until > $2) AS unshelve_at
                  FROM alerts WHERE closed_at IS NULL AND active AND ($1::text[] IS NULL OR unit_id = ANY($1))
                 GROUP BY unit_id),
          f AS (SELECT u.id, u.name, u.site,
            (SELECT v.config->>'temperatureUnit' FROM unit_config_versions v
              WHERE v.unit_id = u.id AND v.effective_from <= $2 ORDER BY v.effective_from DESC LIMIT 1) AS temperature_unit,
            (SELECT min(v.effective_from) FROM unit_config_versions v WHERE v.unit_id = u.id AND v.effective_from > $2) AS next_config_at,
            (SELECT max(r.ts) FROM rings r WHERE r.unit_id = u.id AND r.ts > $2::timestamptz - $3::interval) AS last_ring_ts,
            ra.ts AS analysis_ts, ra.load_fraction, ra.spread, ra.spread_limit, ra.valid_count, cardinality(ra.validity) AS tc_count,
            a.worst, coalesce(a.active, 0) AS active, coalesce(a.unacked, 0) AS unacked, coalesce(a.shelved, 0) AS shelved, a.unshelve_at,
            s.fired_starts, s.failed_starts, s.trips, s.fired_seconds, l.crank_at AS last_start_at, l.outcome AS last_start_outcome
       FROM u
       LEFT JOIN analysis_progress p ON p.unit_id = u.id
       LEFT JOIN LATERAL (SELECT ts, load_fraction, spread, spread_limit, valid_count, validity FROM ring_analysis x
                           WHERE x.unit_id = u.id AND x.ts = p.watermark_ts) ra ON true
       LEFT JOIN a ON a.unit_id = u.id
       LEFT JOIN start_state s ON s.unit_id = u.id
       LEFT JOIN LATERAL (SELECT crank_at, outcome FROM starts WHERE unit_id = u.id ORDER BY crank_at DESC LIMIT 1) l ON true)
     SELECT h.snap, f.* FROM (SELECT pg_current_snapshot()::text AS snap) h LEFT JOIN f ON true
      ORDER BY f.id`,
    values: [scope, new Date(nowMs), `${LAST_RING_WINDOW_MS / 1000} seconds`],
  });
  const records: FleetRecord[] = [];
  const starts = new Map<string, FleetStarts>();
  let changesAtMs: number | null = null;
  const sooner = (v: unknown) => {
    if (v instanceof Date && Number.isFinite(v.getTime()) && (changesAtMs === null || v.getTime() < changesAtMs)) changesAtMs = v.getTime();
  };
  for (const r of rows) {
    if (r.id === null) continue;
    records.push({
      unitId: r.id,
      name: r.name,
      site: r.site,
      temperatureUnit: r.temperature_unit === 'F' ? 'F' : 'C',
      lastRingTs: iso(r.last_ring_ts) ?? iso(r.analysis_ts),
      lastAnalysisTs: iso(r.analysis_ts),
      loadFraction: num(r.load_fraction),
      spreadC: num(r.spread),
      spreadLimitC: num(r.spread_limit),
      validCount: num(r.valid_count),
      thermocoupleCount: num(r.tc_count),
      worstGrade: r.worst === null || r.worst === undefined ? null : GRADE_BY_RANK[Number(r.worst)],
      activeAlerts: Number(r.active),
      unacknowledged: Number(r.unacked),
      shelvedAlerts: Number(r.shelved),
    });
    starts.set(r.id, {
      firedStarts: Number(r.fired_starts ?? 0),
      failedStarts: Number(r.failed_starts ?? 0),
      trips: Number(r.trips ?? 0),
      firedHours: Math.round((Number(r.fired_seconds ?? 0) / 3600) * 100) / 100,
      lastStartAt: iso(r.last_start_at),
      lastStartOutcome: r.last_start_outcome ?? null,
    });
    sooner(r.unshelve_at);
    sooner(r.next_config_at);
    // The latest stored ring is looked for over the last five weeks only.
    if (r.last_ring_ts instanceof Date) sooner(new Date(r.last_ring_ts.getTime() + LAST_RING_WINDOW_MS));
  }
  return { records, starts, snapshot: rows[0].snap, changesAtMs };
}

/**
 * A version of each unit's fleet row, of everything fleetState reads for it except its rings and
 * the clock: the xmin of its units, analysis_progress and start_state rows, and the row count and
 * xmin sum of its open alerts and of its configuration versions. Every insert, update or delete
 * of one of those rows changes the version of that unit alone, whichever order the writing
 * transactions committed in; an equal version means an equal row, apart from rings stored but not
 * yet analysed. Read at one commit snapshot, which it returns.
 */
export async function fleetUnitVersions(q: Queryable, scope: string[] | null): Promise<{ snapshot: string; versions: Map<string, string> }> {
  const { rows } = await q.query({
    name: 'fleet_unit_versions',
    text: `WITH u AS (SELECT id, xmin FROM units WHERE $1::text[] IS NULL OR id = ANY($1)),
          a AS (SELECT unit_id, count(*) || ':' || sum(xmin::text::bigint) AS v FROM alerts
                 WHERE closed_at IS NULL AND ($1::text[] IS NULL OR unit_id = ANY($1)) GROUP BY unit_id),
          c AS (SELECT unit_id, count(*) || ':' || sum(xmin::text::bigint) AS v FROM unit_config_versions
                 WHERE $1::text[] IS NULL OR unit_id = ANY($1) GROUP BY unit_id),
          f AS (SELECT u.id, u.xmin || '/' || coalesce(p.xmin::text, '-') || '/' || coalesce(s.xmin::text, '-') || '/' ||
                       coalesce(a.v, '-') || '/' || coalesce(c.v, '-') AS v
                  FROM u
                  LEFT JOIN analysis_progress p ON p.unit_id = u.id
                  LEFT JOIN start_state s ON s.unit_id = u.id
                  LEFT JOIN a ON a.unit_id = u.id
                  LEFT JOIN c ON c.unit_id = u.id)
     SELECT h.snap, f.id, f.v FROM (SELECT pg_current_snapshot()::text AS snap) h LEFT JOIN f ON true`,
    values: [scope],
  });
  const versions = new Map<string, string>();
  for (const r of rows) if (r.id !== null) versions.set(r.id as string, r.v as string);
  return { snapshot: rows[0].snap as string, versions };
}

/**
 * The database's commit snapshot (`xmin:xmax:in-progress ids`). Two equal texts mean that no
 * transaction committed or aborted between the two reads: anything read at the first is still
 * exactly what a read now would return, apart from what depends on the clock. Any write anywhere
 * in the cluster changes it, so it is a validator for caches, never a version of one table.
 */
export async function commitSnapshot(q: Queryable): Promise<string> {
  const { rows } = await q.query({ name: 'commit_snapshot', text: `SELECT pg_current_snapshot()::text AS snap` });
  return rows[0].snap as string;
}

// ---------------------------------------------------------------------------------------------
// One analysed ring.

export interface StoredAnalysis {
  ts: string;
  configVersion: number;
  baselineVersion: number | null;
  loadFraction: number | null;
  steady: boolean;
  spreadC: number | null;
  spreadExcl1C: number | null;
  spreadExcl2C: number | null;
  spreadLimitC: number | null;
  limitFromBaseline: boolean;
  ringMeanC: number | null;
  robustCentreC: number | null;
  hottestTc: number | null;
  coldestTc: number | null;
  validCount: number;
  coverageDegraded: boolean;
  /** Reason code per thermocouple, index 0 = thermocouple 1 (0 = valid). */
  validity: number[];
  tcDeviationC: (number | null)[];
  tcResidualC: (number | null)[] | null;
  swirlDeg: number | null;
  chamberDeviationC: (number | null)[];
  chamberUncertaintyC: (number | null)[];
  chamberResidualC: (number | null)[] | null;
  worstChamber: number | null;
  worstLikelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
}

function storedAnalysis(r: Record<string, unknown>): StoredAnalysis {
  return {
    ts: iso(r.ts) as string,
    configVersion: Number(r.config_version),
    baselineVersion: num(r.baseline_version),
    loadFraction: num(r.load_fraction),
    steady: Boolean(r.steady),
    spreadC: num(r.spread),
    spreadExcl1C: num(r.spread_excl1),
    spreadExcl2C: num(r.spread_excl2),
    spreadLimitC: num(r.spread_limit),
    limitFromBaseline: Boolean(r.limit_from_baseline),
    ringMeanC: num(r.ring_mean),
    robustCentreC: num(r.robust_centre),
    hottestTc: num(r.hottest_tc),
    coldestTc: num(r.coldest_tc),
    validCount: Number(r.valid_count),
    coverageDegraded: Boolean(r.coverage_degraded),
    validity: ((r.validity as number[] | null) ?? []).map(Number),
    tcDeviationC: numArray(r.tc_deviation) ?? [],
    tcResidualC: numArray(r.tc_residual),
    swirlDeg: num(r.swirl_deg),
    chamberDeviationC: numArray(r.chamber_deviation) ?? [],
    chamberUncertaintyC: numArray(r.chamber_uncertainty) ?? [],
    chamberResidualC: numArray(r.chamber_residual),
    worstChamber: num(r.worst_chamber),
    worstLikelihood: num(r.worst_likelihood),
    runnerUpChamber: num(r.runner_up_chamber),
    runnerUpLikelihood: num(r.runner_up_likelihood),
  };
}

const ANALYSIS_COLS = `ts, config_version, baseline_version, load_fraction, steady, spread, spread_excl1, spread_excl2, spread_limit, limit_from_baseline,
  ring_mean, robust_centre, hottest_tc, coldest_tc, valid_count, coverage_degraded, validity, tc_deviation, tc_residual, swirl_deg,
  chamber_deviation, chamber_uncertainty, chamber_residual, worst_chamber, worst_likelihood, runner_up_chamber, runner_up_likelihood`;

/** The analysed ring nearest to `atMs` (the latest when atMs is null), or null when there is none. */
export async function analysisNear(q: Queryable, unitId: string, atMs: number | null): Promise<StoredAnalysis | null> {
  if (atMs === null) {
    const { rows } = await q.query(`SELECT ${ANALYSIS_COLS} FROM ring_analysis WHERE unit_id = $1 ORDER BY ts DESC LIMIT 1`, [unitId]);
    return rows.length ? storedAnalysis(rows[0]) : null;
  }
  const { rows } = await q.query(
    `(SELECT ${ANALYSIS_COLS} FROM ring_analysis WHERE unit_id = $1 AND ts <= $2 ORDER BY ts DESC LIMIT 1)
     UNION ALL
     (SELECT ${ANALYSIS_COLS} FROM ring_analysis WHERE unit_id = $1 AND ts > $2 ORDER BY ts ASC LIMIT 1)`,
    [unitId, new Date(atMs)],
  );
  if (rows.length === 0) return null;
  const best = rows.reduce((a, b) => (Math.abs((a.ts as Date).getTime() - atMs) <= Math.abs((b.ts as Date).getTime() - atMs) ? a : b));
  return storedAnalysis(best);
}

/** Time of the unit's latest stored ring, or null before its first. */
export async function lastRingMs(q: Queryable, unitId: string): Promise<number | null> {
  const { rows } = await q.query(`SELECT ts FROM rings WHERE unit_id = $1 ORDER BY ts DESC LIMIT 1`, [unitId]);
  return rows.length ? (rows[0].ts as Date).getTime() : null;
}

/** Time of the first analysed ring at or after sinceMs, or null. */
export async function firstAnalysisTs(q: Queryable, unitId: string, sinceMs: number): Promise<number | null> {
  const { rows } = await q.query(`SELECT ts FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 ORDER BY ts LIMIT 1`, [unitId, new Date(sinceMs)]);
  return rows.length ? (rows[0].ts as Date).getTime() : null;
}

/** The raw ring readings at one instant (°C, index 0 = thermocouple 1), or null. */
export async function ringReadings(q: Queryable, unitId: string, tsIso: string): Promise<(number | null)[] | null> {
  const { rows } = await q.query(`SELECT exhaust_c FROM rings WHERE unit_id = $1 AND ts = $2`, [unitId, tsIso]);
  return rows.length ? numArray(rows[0].exhaust_c) : null;
}

// ---------------------------------------------------------------------------------------------
// Time series.

/** Unit-level figures per bucket: count, and mean / min / max of each. */
export interface SeriesBucket {
  ts: string;
  rings: number;
  steady: number;
  figures: Record<string, { mean: number | null; min: number | null; max: number | null }>;
}

export const UNIT_SERIES_COLUMNS = {
  loadFraction: 'load_fraction',
  spreadC: 'spread',
  spreadExcl1C: 'spread_excl1',
  spreadExcl2C: 'spread_excl2',
  spreadLimitC: 'spread_limit',
  ringMeanC: 'ring_mean',
  validCount: 'valid_count',
} as const;

/**
 * Per-minute (or coarser) buckets straight from ring_analysis over [fromMs, toMs); the caller
 * bounds the window. Buckets are aligned to the epoch.
 */
export async function rawSeries(q: Queryable, unitId: string, fromMs: number, toMs: number, bucketS: number, limit: number): Promise<SeriesBucket[]> {
  const figures = Object.entries(UNIT_SERIES_COLUMNS);
  const agg = figures.map(([name, col]) => `avg(${col})::float8 AS "${name}_mean", min(${col})::float8 AS "${name}_min", max(${col})::float8 AS "${name}_max"`).join(', ');
  const { rows } = await q.query(
    `SELECT date_bin(make_interval(secs => $4), ts, 'epoch') AS b, count(*) AS n, count(*) FILTER (WHERE steady) AS steady, ${agg}
       FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3
      GROUP BY b ORDER BY b LIMIT $5`,
    [unitId, new Date(fromMs), new Date(toMs), bucketS, limit],
  );
  return rows.map((r) => ({
    ts: iso(r.b) as string,
    rings: Number(r.n),
    steady: Number(r.steady),
    figures: Object.fromEntries(figures.map(([name]) => [name, { mean: num(r[`${name}_mean`]), min: num(r[`${name}_min`]), max: num(r[`${name}_max`]) }])),
  }));
}

/** One rollup bucket of one metric: per subject (index 0 = subject 1) count, mean, sd, min, max. */
export interface RollupBucket {
  bucketMs: number;
  metric: string;
  n: number[];
  mean: (number | null)[];
  sd: (number | null)[];
  min: (number | null)[];
  max: (number | null)[];
}

function rollupBucket(r: Record<string, unknown>, subject: number | null): RollupBucket {
  const pick = <T>(a: unknown): T[] => {
    const arr = (a as T[] | null) ?? [];
    return subject === null ? arr : [arr[subject - 1]];
  };
  const n = pick<number | null>(r.n).map((v) => Number(v ?? 0));
  const sum = pick<number | null>(r.sum).map(num);
  const sumsq = pick<number | null>(r.sumsq).map(num);
  const mean = n.map((k, i) => (k > 0 && sum[i] !== null ? sum[i]! / k : null));
  const sd = n.map((k, i) => (k > 1 && sum[i] !== null && sumsq[i] !== null ? Math.sqrt(Math.max(0, (sumsq[i]! - (sum[i]! * sum[i]!) / k) / (k - 1))) : null));
  return { bucketMs: (r.bucket as Date).getTime(), metric: String(r.metric), n, mean, sd, min: pick<number | null>(r.min).map(num), max: pick<number | null>(r.max).map(num) };
}

/**
 * Rollup buckets of a unit over [fromMs, toMs) for the given metrics, oldest first. With
 * `subject` (numbered from 1), only that element of each array is returned, selected in SQL.
 */
export async function rollupSeries(
  q: Queryable,
  unitId: string,
  period: 'hour' | 'day',
  fromMs: number,
  toMs: number,
  metrics: readonly string[],
  subject: number | null = null,
  limit = 20_000,
): Promise<RollupBucket[]> {
  const cols = subject === null ? 'n, sum, sumsq, min, max' : `ARRAY[n[$6]] AS n, ARRAY[sum[$6]] AS sum, ARRAY[sumsq[$6]] AS sumsq, ARRAY[min[$6]] AS min, ARRAY[max[$6]] AS max`;
  const params: unknown[] = [unitId, period, new Date(fromMs), new Date(toMs), metrics];
  if (subject !== null) params.push(subject);
  params.push(limit);
  const { rows } = await q.query(
    `SELECT metric, bucket, ${cols} FROM analysis_rollups
      WHERE unit_id = $1 AND period = $2 AND bucket >= $3 AND bucket < $4 AND metric = ANY($5::text[])
      ORDER BY bucket, metric LIMIT $${params.length}`,
    params,
  );
  return rows.map((r) => rollupBucket(r, null));
}

// ---------------------------------------------------------------------------------------------
// Baselines and drift.

export interface BaselineRecord {
  version: number;
  windowFrom: string;
  windowTo: string;
  method: string;
  fittedAt: string;
  fittedBy: string;
  sampleCount: number;
  body: unknown;
}

/** The newest baseline version of a unit with its body, or null. */
export async function latestBaseline(q: Queryable, unitId: string): Promise<BaselineRecord | null> {
  const { rows } = await q.query(
    `SELECT version, window_from, window_to, method, fitted_at, fitted_by, sample_count, body FROM baselines WHERE unit_id = $1 ORDER BY version DESC LIMIT 1`,
    [unitId],
  );
  if (!rows.length) return null;
  const r = rows[0];
  return { version: r.version, windowFrom: iso(r.window_from)!, windowTo: iso(r.window_to)!, method: r.method, fittedAt: iso(r.fitted_at)!, fittedBy: r.fitted_by, sampleCount: r.sample_count, body: r.body };
}

export interface DriftStateRecord {
  index: number;
  baselineVersion: number;
  lastDay: string;
  sigmaC: number | null;
  days: number;
  rate: {
    per30DaysDegC: number;
    per30DaysInterval: [number, number];
    per1000FiredHoursDegC: number | null;
    per1000FiredHoursInterval: [number, number] | null;
    significant: boolean;
    n: number;
  } | null;
  cusum: { upper: number; lower: number; h: number; k: number } | null;
  lastValueC: number | null;
}

/** Latest drift state of each chamber or thermocouple of a unit (index numbered from 1). */
export async function driftStates(q: Queryable, unitId: string, subject: 'chamber' | 'thermocouple'): Promise<DriftStateRecord[]> {
  const { rows } = await q.query(
    `SELECT idx, baseline_version, last_day, sigma, days, rate, cusum, last_value FROM drift_state WHERE unit_id = $1 AND subject = $2 ORDER BY idx LIMIT 256`,
    [unitId, subject],
  );
  return rows.map((r) => ({
    index: Number(r.idx),
    baselineVersion: Number(r.baseline_version),
    lastDay: r.last_day instanceof Date ? r.last_day.toISOString().slice(0, 10) : String(r.last_day),
    sigmaC: num(r.sigma),
    days: Number(r.days),
    rate: r.rate ?? null,
    cusum: r.cusum ?? null,
    lastValueC: num(r.last_value),
  }));
}

// ---------------------------------------------------------------------------------------------
// Validity history.

export interface ValidityTally {
  /** Rings analysed in the window. */
  rings: number;
  /** Per thermocouple (index 0 = thermocouple 1): count of rings by reason code (0 = valid). */
  byThermocouple: Array<Record<number, number>>;
}

/**
 * Counts each thermocouple's validity codes over the analysed rings of [fromMs, toMs); the
 * caller bounds the window (a week of one-minute rings is about ten thousand rows).
 */
export async function validityTally(q: Queryable, unitId: string, fromMs: number, toMs: number): Promise<ValidityTally> {
  const { rows } = await q.query(
    `WITH w AS (SELECT validity FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3)
     SELECT NULL::int AS i, NULL::int AS code, count(*) AS n FROM w
     UNION ALL
     SELECT u.i::int, u.code::int, count(*) FROM w, unnest(w.validity) WITH ORDINALITY AS u(code, i) WHERE u.code <> 0 GROUP BY u.i, u.code`,
    [unitId, new Date(fromMs), new Date(toMs)],
  );
  const by: Array<Record<number, number>> = [];
  let rings = 0;
  for (const r of rows) {
    if (r.i === null) {
      rings = Number(r.n);
      continue;
    }
    const i = Number(r.i) - 1;
    while (by.length <= i) by.push({});
    by[i][Number(r.code)] = Number(r.n);
  }
  return { rings, byThermocouple: by };
}

/** How well the plume model fitted the steady rings of [fromMs, toMs) (the caller bounds it). */
export async function fitQuality(q: Queryable, unitId: string, fromMs: number, toMs: number): Promise<{ rings: number; meanFitSdC: number | null; p90FitSdC: number | null; meanWorstLikelihood: number | null }> {
  const { rows } = await q.query(
    `SELECT count(*) AS n, avg(fit_sd)::float8 AS mean_sd, percentile_cont(0.9) WITHIN GROUP (ORDER BY fit_sd)::float8 AS p90_sd, avg(worst_likelihood)::float8 AS lik
       FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3 AND steady AND fit_sd IS NOT NULL AND fit_sd <> 'NaN'::real`,
    [unitId, new Date(fromMs), new Date(toMs)],
  );
  const r = rows[0];
  return { rings: Number(r.n), meanFitSdC: num(r.mean_sd), p90FitSdC: num(r.p90_sd), meanWorstLikelihood: num(r.lik) };
}

/**
 * The median spread of each unit's steady rings with corrected load in [loFraction, hiFraction],
 * over the `days` up to that unit's latest analysed ring: spreads of units of one design made
 * comparable at one load. A unit with no such ring is missing from the map.
 */
export async function spreadAtLoad(q: Queryable, unitIds: readonly string[], loFraction: number, hiFraction: number, days: number): Promise<Map<string, { spreadC: number; rings: number }>> {
  if (unitIds.length === 0) return new Map();
  const { rows } = await q.query(
    `SELECT r.unit_id, percentile_cont(0.5) WITHIN GROUP (ORDER BY r.spread)::float8 AS spread, count(*) AS n
       FROM unnest($1::text[]) AS u(id)
       CROSS JOIN LATERAL (SELECT max(ts) AS last FROM ring_analysis WHERE unit_id = u.id) l
       JOIN ring_analysis r ON r.unit_id = u.id AND r.ts > l.last - make_interval(days => $4::int) AND r.ts <= l.last
      WHERE r.steady AND r.load_fraction BETWEEN $2 AND $3 AND r.spread IS NOT NULL AND r.spread <> 'NaN'::real
      GROUP BY r.unit_id`,
    [unitIds, loFraction, hiFraction, days],
  );
  return new Map(rows.map((r) => [String(r.unit_id), { spreadC: Number(r.spread), rings: Number(r.n) }]));
}

// ---------------------------------------------------------------------------------------------
// Alerts, as the read routes and the review need them.

export interface AlertSummary {
  id: string;
  kind: string;
  grade: Grade;
  chamber: number | null;
  thermocouple: number | null;
  active: boolean;
  acknowledged: boolean;
  shelvedUntil: string | null;
  raisedAt: string;
  clearedAt: string | null;
  message: string;
  advice: string;
  evidence: Record<string, unknown>;
  likelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
  baselineVersion: number | null;
}

/**
 * Alerts of a unit that were open at any time in [fromMs, toMs] (raised before `to` and not
 * closed before `from`), newest first; at most `limit`.
 */
export async function unitAlerts(q: Queryable, unitId: string, fromMs: number, toMs: number, limit = 2000): Promise<AlertSummary[]> {
  const { rows } = await q.query(
    `SELECT id, kind, grade, chamber, thermocouple, active, acknowledged, shelved_until, raised_at, cleared_at, message, advice, evidence,
            likelihood, runner_up_chamber, runner_up_likelihood, baseline_version
       FROM alerts WHERE unit_id = $1 AND raised_at <= $3 AND (closed_at IS NULL OR closed_at >= $2)
      ORDER BY raised_at DESC, id DESC LIMIT $4`,
    [unitId, new Date(fromMs), new Date(toMs), limit],
  );
  return rows.map((r) => ({
    id: r.id,
    kind: r.kind,
    grade: r.grade,
    chamber: num(r.chamber),
    thermocouple: num(r.thermocouple),
    active: r.active,
    acknowledged: r.acknowledged,
    shelvedUntil: iso(r.shelved_until),
    raisedAt: iso(r.raised_at)!,
    clearedAt: iso(r.cleared_at),
    message: r.message,
    advice: r.advice,
    evidence: r.evidence ?? {},
    likelihood: num(r.likelihood),
    runnerUpChamber: num(r.runner_up_chamber),
    runnerUpLikelihood: num(r.runner_up_likelihood),
    baselineVersion: num(r.baseline_version),
  }));
}

// ---------------------------------------------------------------------------------------------
// Rings for swirl calibration.

export interface CalibrationRing {
  tsMs: number;
  loadMw: number;
  ambientC: number;
  ambientKPa: number;
  speedPct: number;
  exhaustC: (number | null)[];
}

/** Rings of [fromMs, toMs), evenly thinned by the database to at most `limit`. */
export async function ringsForCalibration(q: Queryable, unitId: string, fromMs: number, toMs: number, limit: number): Promise<{ total: number; rings: CalibrationRing[] }> {
  const count = await q.query(`SELECT count(*) AS n FROM rings WHERE unit_id = $1 AND ts >= $2 AND ts < $3`, [unitId, new Date(fromMs), new Date(toMs)]);
  const total = Number(count.rows[0].n);
  const stride = Math.max(1, Math.ceil(total / limit));
  const { rows } = await q.query(
    `SELECT ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c FROM (
       SELECT *, row_number() OVER (ORDER BY ts) AS k FROM rings WHERE unit_id = $1 AND ts >= $2 AND ts < $3) s
      WHERE (k - 1) % $4 = 0 ORDER BY ts LIMIT $5`,
    [unitId, new Date(fromMs), new Date(toMs), stride, limit],
  );
  return {
    total,
    rings: rows.map((r) => ({
      tsMs: (r.ts as Date).getTime(),
      loadMw: Number(r.load_mw),
      ambientC: Number(r.ambient_c),
      ambientKPa: Number(r.ambient_kpa),
      speedPct: Number(r.speed_pct),
      exhaustC: numArray(r.exhaust_c) ?? [],
    })),
  };
}

export interface StoredDeviationRing {
  tsMs: number;
  loadFraction: number;
  /** Validity code per thermocouple (0 = valid). */
  validity: number[];
  /** Reading − ring centre per thermocouple, °C; null where invalid. */
  deviationC: (number | null)[];
}

/**
 * The steady analysed rings of a window with their thermocouple deviations, thinned evenly to
 * at most `limit`: what a re-mapping of the chambers needs, without the raw rings.
 */
export async function steadyDeviations(q: Queryable, unitId: string, fromMs: number, toMs: number, limit: number): Promise<{ total: number; rings: StoredDeviationRing[] }> {
  const count = await q.query(`SELECT count(*) AS n FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3 AND steady AND load_fraction IS NOT NULL`, [unitId, new Date(fromMs), new Date(toMs)]);
  const total = Number(count.rows[0].n);
  const stride = Math.max(1, Math.ceil(total / limit));
  const { rows } = await q.query(
    `SELECT ts, load_fraction, validity, tc_deviation FROM (
       SELECT ts, load_fraction, validity, tc_deviation, row_number() OVER (ORDER BY ts) AS k
         FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3 AND steady AND load_fraction IS NOT NULL) s
      WHERE (k - 1) % $4 = 0 ORDER BY ts LIMIT $5`,
    [unitId, new Date(fromMs), new Date(toMs), stride, limit],
  );
  return {
    total,
    rings: rows.map((r) => ({ tsMs: (r.ts as Date).getTime(), loadFraction: Number(r.load_fraction), validity: (r.validity as number[]).map(Number), deviationC: numArray(r.tc_deviation) ?? [] })),
  };
}

export type ReadsRepository = ReturnType<typeof createReadsRepository>;

/** The repository object decorated onto the application (same functions, pool bound). */
export function createReadsRepository(pool: pg.Pool) {
  return {
    fleetState: (scope: string[] | null, nowMs: number) => fleetState(pool, scope, nowMs),
    fleetUnitVersions: (scope: string[] | null) => fleetUnitVersions(pool, scope),
    analysisNear: (unitId: string, atMs: number | null) => analysisNear(pool, unitId, atMs),
    firstAnalysisTs: (unitId: string, sinceMs: number) => firstAnalysisTs(pool, unitId, sinceMs),
    lastRingMs: (unitId: string) => lastRingMs(pool, unitId),
    ringReadings: (unitId: string, tsIso: string) => ringReadings(pool, unitId, tsIso),
    rawSeries: (unitId: string, fromMs: number, toMs: number, bucketS: number, limit: number) => rawSeries(pool, unitId, fromMs, toMs, bucketS, limit),
    rollupSeries: (unitId: string, period: 'hour' | 'day', fromMs: number, toMs: number, metrics: readonly string[], subject: number | null = null, limit?: number) =>
      rollupSeries(pool, unitId, period, fromMs, toMs, metrics, subject, limit),
    latestBaseline: (unitId: string) => latestBaseline(pool, unitId),
    baselineOutlook: (unitId: string) => baselineOutlook(pool, unitId),
    driftStates: (unitId: string, subject: 'chamber' | 'thermocouple') => driftStates(pool, unitId, subject),
    validityTally: (unitId: string, fromMs: number, toMs: number) => validityTally(pool, unitId, fromMs, toMs),
    unitAlerts: (unitId: string, fromMs: number, toMs: number, limit?: number) => unitAlerts(pool, unitId, fromMs, toMs, limit),
    fitQuality: (unitId: string, fromMs: number, toMs: number) => fitQuality(pool, unitId, fromMs, toMs),
    ringsForCalibration: (unitId: string, fromMs: number, toMs: number, limit: number) => ringsForCalibration(pool, unitId, fromMs, toMs, limit),
    calls: (unitIds: readonly string[] | null) => listCalls(pool, unitIds),
    events: (unitId: string, fromMs?: number, toMs?: number) => unitEvents(pool, unitId, fromMs, toMs),
    steadyDeviations: (unitId: string, fromMs: number, toMs: number, limit: number) => steadyDeviations(pool, unitId, fromMs, toMs, limit),
    spreadAtLoad: (unitIds: readonly string[], loFraction: number, hiFraction: number, days: number) => spreadAtLoad(pool, unitIds, loFraction, hiFraction, days),
  };
}
