/**
 * Stored analysis, read: a unit's analysed rings in columns over a window (all, steady only, or
 * an even sample by a hash of the time), what a baseline fit takes from them, the latest
 * analysed ring and the last rings before an instant. Read with binary COPY: no text
 * formatting of readings on either side. No analytics here.
 */
import type pg from 'pg';
import { CopyBinaryReader, copyOut, isoMicros } from './pg-binary.ts';
import { lit, msOf, tsLit } from './sql.ts';

type Queryable = pg.Pool | pg.ClientBase;

/** Time of a unit's first analysed ring after afterMs (-Infinity: from the start), or null. */
export async function firstAnalysisAfter(client: Queryable, unitId: string, afterMs: number): Promise<number | null> {
  const { rows } = await client.query(
    Number.isFinite(afterMs)
      ? { text: `SELECT ${msOf('min(ts)')} AS t FROM ring_analysis WHERE unit_id = $1 AND ts > $2`, values: [unitId, isoMicros(afterMs)] }
      : { text: `SELECT ${msOf('min(ts)')} AS t FROM ring_analysis WHERE unit_id = $1`, values: [unitId] },
  );
  return rows[0].t === null ? null : Number(rows[0].t);
}

/** Stored analysis in columns, oldest first. */
export interface AnalysisColumns {
  count: number;
  tsMs: Float64Array;
  loadFraction: Float64Array;
  steady: Uint8Array;
  spread: Float64Array;
  spreadExcl1: Float64Array;
  spreadExcl2: Float64Array;
  ringMean: Float64Array;
  validity: Float64Array[];
  tcDeviation: Float64Array[];
  tcResidual: (Float64Array | null)[];
  chamberDeviation: Float64Array[];
  chamberResidual: (Float64Array | null)[];
}

const ANALYSIS_READ_COLUMNS = 'ts, load_fraction, steady, spread, spread_excl1, spread_excl2, ring_mean, validity, tc_deviation, tc_residual, chamber_deviation, chamber_residual';

function decodeAnalysis(buf: Buffer): AnalysisColumns {
  const r = new CopyBinaryReader(buf);
  // smallint[] elements take 6 bytes of the body with their length words.
  const arena = r.arena(6);
  const ts: number[] = [];
  const load: number[] = [];
  const steady: number[] = [];
  const spread: number[] = [];
  const e1: number[] = [];
  const e2: number[] = [];
  const mean: number[] = [];
  const validity: Float64Array[] = [];
  const tcDev: Float64Array[] = [];
  const tcRes: (Float64Array | null)[] = [];
  const chDev: Float64Array[] = [];
  const chRes: (Float64Array | null)[] = [];
  while (r.nextRow() > 0) {
    ts.push(r.timestamptz());
    load.push(r.float4());
    steady.push(r.bool() ? 1 : 0);
    spread.push(r.float4());
    e1.push(r.float4());
    e2.push(r.float4());
    mean.push(r.float4());
    validity.push(r.numberArray(arena) ?? new Float64Array(0));
    tcDev.push(r.numberArray(arena) ?? new Float64Array(0));
    tcRes.push(r.numberArray(arena));
    chDev.push(r.numberArray(arena) ?? new Float64Array(0));
    chRes.push(r.numberArray(arena));
  }
  return {
    count: ts.length,
    tsMs: Float64Array.from(ts),
    loadFraction: Float64Array.from(load),
    steady: Uint8Array.from(steady),
    spread: Float64Array.from(spread),
    spreadExcl1: Float64Array.from(e1),
    spreadExcl2: Float64Array.from(e2),
    ringMean: Float64Array.from(mean),
    validity,
    tcDeviation: tcDev,
    tcResidual: tcRes,
    chamberDeviation: chDev,
    chamberResidual: chRes,
  };
}

/** Analysis of a unit with fromMs ≤ ts < toMs, oldest first (steadyOnly: steady rings only). */
export async function readAnalysis(
  client: pg.ClientBase,
  unitId: string,
  fromMs: number,
  toMs: number,
  opts: { steadyOnly?: boolean; limit?: number; sampleEvery?: number } = {},
): Promise<AnalysisColumns> {
  const k = Math.floor(opts.sampleEvery ?? 1);
  const steady = (opts.steadyOnly ? ' AND steady' : '') + (k > 1 ? ` AND abs(hashtext(ts::text)) % ${k} = 0` : '');
  const limit = opts.limit ? ` LIMIT ${Math.floor(opts.limit)}` : '';
  const body = await copyOut(
    client,
    `SELECT ${ANALYSIS_READ_COLUMNS} FROM ring_analysis WHERE unit_id = ${lit(unitId)} AND ts >= ${tsLit(fromMs)} AND ts < ${tsLit(toMs)}${steady} ORDER BY ts${limit}`,
  );
  return decodeAnalysis(body);
}

/** What a baseline fit takes from each steady analysed ring. Arrays: index 0 = thermocouple / chamber 1. */
export interface BaselineSampleColumns {
  count: number;
  loadFraction: Float64Array;
  ringMean: Float64Array;
  spread: Float64Array;
  tcDeviation: Float64Array[];
  chamberDeviation: Float64Array[];
  /** The combustion mode of each ring (null where none was sent). */
  mode: (string | null)[];
}

/**
 * The steady analysed rings of a unit with fromMs ≤ ts < toMs, oldest first, every
 * sampleEvery-th by the same hash of the time as readAnalysis: only the columns a baseline fit
 * uses (the database sends two arrays per ring instead of five).
 */
export async function readBaselineSamples(client: pg.ClientBase, unitId: string, fromMs: number, toMs: number, sampleEvery = 1): Promise<BaselineSampleColumns> {
  const k = Math.floor(sampleEvery);
  const sample = k > 1 ? ` AND abs(hashtext(ts::text)) % ${k} = 0` : '';
  const body = await copyOut(
    client,
    `SELECT load_fraction, ring_mean, spread, tc_deviation, chamber_deviation,
            (SELECT r.mode FROM rings r WHERE r.unit_id = a.unit_id AND r.ts = a.ts) AS mode
       FROM ring_analysis a WHERE unit_id = ${lit(unitId)} AND ts >= ${tsLit(fromMs)} AND ts < ${tsLit(toMs)} AND steady${sample} ORDER BY ts`,
  );
  const r = new CopyBinaryReader(body);
  const arena = r.arena();
  const load: number[] = [];
  const mean: number[] = [];
  const spread: number[] = [];
  const tcDev: Float64Array[] = [];
  const chDev: Float64Array[] = [];
  const mode: (string | null)[] = [];
  while (r.nextRow() > 0) {
    load.push(r.float4());
    mean.push(r.float4());
    spread.push(r.float4());
    tcDev.push(r.numberArray(arena) ?? new Float64Array(0));
    chDev.push(r.numberArray(arena) ?? new Float64Array(0));
    mode.push(r.text());
  }
  return { count: load.length, loadFraction: Float64Array.from(load), ringMean: Float64Array.from(mean), spread: Float64Array.from(spread), tcDeviation: tcDev, chamberDeviation: chDev, mode };
}

/** Steady analysed rings of a unit in [fromMs, toMs). */
export async function countSteady(q: Queryable, unitId: string, fromMs: number, toMs: number): Promise<number> {
  const { rows } = await q.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE unit_id = $1 AND ts >= $2 AND ts < $3 AND steady`, [unitId, isoMicros(fromMs), isoMicros(toMs)]);
  return rows[0].n as number;
}

/** The last `count` analysed rings at or before atMs, oldest first. */
export async function readLastAnalysis(client: pg.ClientBase, unitId: string, atMs: number, count: number): Promise<AnalysisColumns> {
  const body = await copyOut(
    client,
    `SELECT * FROM (SELECT ${ANALYSIS_READ_COLUMNS} FROM ring_analysis WHERE unit_id = ${lit(unitId)} AND ts <= ${tsLit(atMs)} ORDER BY ts DESC LIMIT ${Math.floor(count)}) x ORDER BY ts`,
  );
  return decodeAnalysis(body);
}

/** Spread of the last steady analysed ring at or before atMs, or null. */
export async function lastSteadySpread(client: pg.ClientBase, unitId: string, atMs: number): Promise<number | null> {
  const { rows } = await client.query(`SELECT spread FROM ring_analysis WHERE unit_id = $1 AND ts <= $2 AND steady ORDER BY ts DESC LIMIT 1`, [unitId, isoMicros(atMs)]);
  return rows.length && rows[0].spread !== null ? Number(rows[0].spread) : null;
}

export interface LatestAnalysis {
  ts: Date;
  configVersion: number;
  baselineVersion: number | null;
  loadFraction: number | null;
  steady: boolean;
  spread: number | null;
  spreadExcl1: number | null;
  spreadExcl2: number | null;
  spreadLimit: number | null;
  limitFromBaseline: boolean;
  ringMean: number | null;
  hottestTc: number | null;
  coldestTc: number | null;
  secondColdestTc: number | null;
  coldestAdjacent: boolean;
  validCount: number;
  coverageDegraded: boolean;
  validity: number[];
  swirlDeg: number | null;
  chamberDeviation: (number | null)[];
  chamberUncertainty: (number | null)[];
  chamberResidual: (number | null)[] | null;
  worstChamber: number | null;
  worstLikelihood: number | null;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number | null;
  findings: unknown;
}

/** The latest analysed ring of a unit, or null. */
export async function latestAnalysis(q: Queryable, unitId: string): Promise<LatestAnalysis | null> {
  // The latest in-order ring analysed is at the unit's watermark (late rings are older): one
  // partition, one index probe, instead of a descent through every month's partition.
  // Named statements: planned once per connection, pruned to one partition at execution.
  let { rows } = await q.query({
    name: 'latest_analysis_at_watermark',
    text: `SELECT * FROM ring_analysis WHERE unit_id = $1 AND ts = (SELECT watermark_ts FROM analysis_progress WHERE unit_id = $1)`,
    values: [unitId],
  });
  if (rows.length === 0) ({ rows } = await q.query(`SELECT * FROM ring_analysis WHERE unit_id = $1 ORDER BY ts DESC LIMIT 1`, [unitId]));
  if (rows.length === 0) return null;
  const r = rows[0];
  const n = (v: unknown) => (v === null || v === undefined ? null : Number(v));
  return {
    ts: r.ts,
    configVersion: r.config_version,
    baselineVersion: r.baseline_version,
    loadFraction: n(r.load_fraction),
    steady: r.steady,
    spread: n(r.spread),
    spreadExcl1: n(r.spread_excl1),
    spreadExcl2: n(r.spread_excl2),
    spreadLimit: n(r.spread_limit),
    limitFromBaseline: r.limit_from_baseline,
    ringMean: n(r.ring_mean),
    hottestTc: r.hottest_tc,
    coldestTc: r.coldest_tc,
    secondColdestTc: r.second_coldest_tc,
    coldestAdjacent: r.coldest_adjacent,
    validCount: r.valid_count,
    coverageDegraded: r.coverage_degraded,
    validity: r.validity,
    swirlDeg: n(r.swirl_deg),
    chamberDeviation: r.chamber_deviation,
    chamberUncertainty: r.chamber_uncertainty,
    chamberResidual: r.chamber_residual,
    worstChamber: r.worst_chamber,
    worstLikelihood: n(r.worst_likelihood),
    runnerUpChamber: r.runner_up_chamber,
    runnerUpLikelihood: n(r.runner_up_likelihood),
    findings: r.findings,
  };
}
