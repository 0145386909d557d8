/**
 * Analysis repository: every query of the worker's analysis path and of the status route.
 * Rings are read and analysis rows written with binary COPY (no text formatting of readings
 * on either side); progress is advanced and the batch logged in the caller's transaction, so
 * the watermark and the analysis it covers commit together or not at all. Rollups are read
 * and written whole (the caller merges). No analytics here.
 */
import type pg from 'pg';
import { CopyBinaryReader, CopyBinaryWriter, copyIn, copyOut, isoMicros, grownBuffer, writeFloat4ArrayField, type Float64Arena } from './pg-binary.ts';

type Queryable = pg.Pool | pg.ClientBase;

/** Rings of one unit in columns, oldest first. Readings °C, NaN where missing. */
export interface RingColumns {
  count: number;
  tsMs: Float64Array;
  loadMw: Float64Array;
  ambientC: Float64Array;
  ambientKPa: Float64Array;
  speedPct: Float64Array;
  exhaustC: Float64Array[];
  /** Fuel flow, kg/s (NaN where not sent), for start analysis. */
  fuelFlowKgS: Float64Array;
  /** Flame detected: 1 yes, 0 no, -1 not sent. */
  flameDetected: Int8Array;
}

/** One analysed ring as stored. Arrays: index 0 = thermocouple / chamber 1; NaN = NULL. */
export interface AnalysisRow {
  tsMs: number;
  configVersion: number;
  baselineVersion: number | null;
  loadFraction: number;
  steady: boolean;
  spread: number;
  spreadExcl1: number;
  spreadExcl2: number;
  spreadLimit: number;
  limitFromBaseline: boolean;
  ringMean: number;
  robustCentre: number;
  stdDev: number;
  hottestTc: number | null;
  coldestTc: number | null;
  secondColdestTc: number | null;
  coldestAdjacent: boolean;
  validCount: number;
  coverageDegraded: boolean;
  validity: Uint8Array;
  tcDeviation: Float64Array;
  /** null when there is no baseline or the ring is not steady. */
  tcResidual: Float64Array | null;
  swirlDeg: number;
  chamberDeviation: Float64Array;
  chamberUncertainty: Float64Array;
  chamberResidual: Float64Array | null;
  ringLevel: number;
  fitSd: number;
  worstChamber: number | null;
  worstLikelihood: number;
  runnerUpChamber: number | null;
  runnerUpLikelihood: number;
  worstGrade: number | null;
  /** JSON text of the findings summary, or null. */
  findingsJson: string | null;
}

const ANALYSIS_COLUMNS =
  'unit_id, ts, config_version, baseline_version, load_fraction, steady, spread, spread_excl1, spread_excl2, spread_limit, limit_from_baseline, ' +
  'ring_mean, robust_centre, std_dev, hottest_tc, coldest_tc, second_coldest_tc, coldest_adjacent, valid_count, coverage_degraded, ' +
  'validity, tc_deviation, tc_residual, swirl_deg, chamber_deviation, chamber_uncertainty, chamber_residual, ring_level, fit_sd, ' +
  'worst_chamber, worst_likelihood, runner_up_chamber, runner_up_likelihood, worst_grade, findings';
const ANALYSIS_FIELD_COUNT = 35;
/** ms between 1970-01-01 and PostgreSQL's epoch 2000-01-01 (UTC). */
const PG_EPOCH_MS = 946_684_800_000;
const TWO_32 = 4_294_967_296;

const lit = (s: string) => "'" + s.replace(/'/g, "''") + "'";
const tsLit = (ms: number) => `'${isoMicros(ms)}'::timestamptz`;
/** Milliseconds since 1970 of a timestamptz column, keeping microseconds as the fraction. */
const msOf = (col: string) => `(extract(epoch from ${col}) * 1000)::float8`;
const MONTH_MS = 31 * 86_400_000;

const knownAnalysisMonths = new WeakMap<object, Set<string>>();

function monthKey(ms: number): string {
  const d = new Date(ms);
  return `${d.getUTCFullYear()}-${d.getUTCMonth()}`;
}

/** Makes sure ring_analysis has monthly partitions for [fromMs, toMs] (remembered per pool). */
export async function ensureAnalysisPartitions(client: pg.ClientBase, pool: object, fromMs: number, toMs: number): Promise<void> {
  let known = knownAnalysisMonths.get(pool);
  if (!known) knownAnalysisMonths.set(pool, (known = new Set()));
  let missing = false;
  for (let t = fromMs; ; t += MONTH_MS) {
    const k = monthKey(Math.min(t, toMs));
    if (!known.has(k)) missing = true;
    if (t >= toMs) break;
  }
  if (!missing) return;
  await client.query('SELECT ensure_analysis_partitions($1, $2)', [new Date(fromMs), new Date(toMs)]);
  for (let t = fromMs; ; t += MONTH_MS) {
    known.add(monthKey(Math.min(t, toMs)));
    if (t >= toMs) break;
  }
}

/** Ring rows being decoded from a binary COPY, column by column. */
class RingColumnsBuilder {
  private ts: number[] = [];
  private load: number[] = [];
  private amb: number[] = [];
  private kpa: number[] = [];
  private speed: number[] = [];
  private ex: Float64Array[] = [];
  private fuel: number[] = [];
  private flame: number[] = [];

  /** Reads the RING_READ_COLUMNS of the reader's current row. */
  add(r: CopyBinaryReader, arena: Float64Arena): void {
    this.ts.push(r.timestamptz());
    this.load.push(r.float4());
    this.amb.push(r.float4());
    this.kpa.push(r.float4());
    this.speed.push(r.float4());
    this.ex.push(r.numberArray(arena) ?? new Float64Array(0));
    this.fuel.push(r.float4());
    const f = r.bool();
    this.flame.push(f === null ? -1 : f ? 1 : 0);
  }

  columns(): RingColumns {
    return {
      count: this.ts.length,
      tsMs: Float64Array.from(this.ts),
      loadMw: Float64Array.from(this.load),
      ambientC: Float64Array.from(this.amb),
      ambientKPa: Float64Array.from(this.kpa),
      speedPct: Float64Array.from(this.speed),
      exhaustC: this.ex,
      fuelFlowKgS: Float64Array.from(this.fuel),
      flameDetected: Int8Array.from(this.flame),
    };
  }
}

function decodeRings(buf: Buffer): RingColumns {
  const r = new CopyBinaryReader(buf);
  const arena = r.arena();
  const b = new RingColumnsBuilder();
  while (r.nextRow() > 0) b.add(r, arena);
  return b.columns();
}

const RING_READ_COLUMNS = 'ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c, fuel_flow_kg_s, flame_detected';

/** Rings of a unit with ts > afterMs (all when null), oldest first, at most limit. */
export async function readRingsAfter(client: pg.ClientBase, unitId: string, afterMs: number | null, limit: number): Promise<RingColumns> {
  const where = afterMs === null ? '' : ` AND ts > ${tsLit(afterMs)}`;
  const body = await copyOut(client, `SELECT ${RING_READ_COLUMNS} FROM rings WHERE unit_id = ${lit(unitId)}${where} ORDER BY ts LIMIT ${Math.max(0, Math.floor(limit))}`);
  return decodeRings(body);
}

/**
 * For several units at once: each unit's rings after its own watermark (all when null), oldest
 * first, at most perUnitLimit each. One COPY for all of them.
 */
export async function readRingsAfterMany(client: pg.ClientBase, entries: { unitId: string; afterMs: number | null }[], perUnitLimit: number): Promise<Map<string, RingColumns>> {
  const out = new Map<string, RingColumns>();
  if (entries.length === 0) return out;
  const ids = entries.map((e) => lit(e.unitId)).join(',');
  const wms = entries.map((e) => (e.afterMs === null ? "'-infinity'" : `'${isoMicros(e.afterMs)}'`)).join(',');
  const body = await copyOut(
    client,
    `SELECT u.unit_id, x.*
       FROM unnest(ARRAY[${ids}]::text[], ARRAY[${wms}]::timestamptz[]) AS u(unit_id, wm)
       CROSS JOIN LATERAL (SELECT ${RING_READ_COLUMNS} FROM rings r WHERE r.unit_id = u.unit_id AND r.ts > u.wm ORDER BY r.ts LIMIT ${Math.max(0, Math.floor(perUnitLimit))}) x
      ORDER BY u.unit_id, x.ts`,
  );
  const r = new CopyBinaryReader(body);
  const arena = r.arena();
  let id: string | null = null;
  let b: RingColumnsBuilder | null = null;
  while (r.nextRow() > 0) {
    const next = r.text() as string;
    if (b === null || next !== id) {
      if (b !== null) out.set(id as string, b.columns());
      id = next;
      b = new RingColumnsBuilder();
    }
    b.add(r, arena);
  }
  if (b !== null) out.set(id as string, b.columns());
  return out;
}

/** Rings of a unit with fromMs ≤ ts ≤ toMs, oldest first, at most limit. */
export async function readRingsBetween(client: pg.ClientBase, unitId: string, fromMs: number, toMs: number, limit: number): Promise<RingColumns> {
  const body = await copyOut(
    client,
    `SELECT ${RING_READ_COLUMNS} FROM rings WHERE unit_id = ${lit(unitId)} AND ts >= ${tsLit(fromMs)} AND ts <= ${tsLit(toMs)} ORDER BY ts LIMIT ${Math.max(0, Math.floor(limit))}`,
  );
  return decodeRings(body);
}

/** Encodes analysis rows (of one unit, or several) for writeAnalysis: a binary COPY body built in place. */
export class AnalysisEncoder {
  private buf = Buffer.alloc(1 << 20);
  private d = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
  private p = 19;
  private rows = 0;
  private unitBytes: Buffer = Buffer.alloc(0);
  private unitOf = '';
  /** Per unit: the first and last ring time written. */
  readonly spans = new Map<string, [number, number]>();

  constructor(readonly unitId: string = '') {
    Buffer.from('PGCOPY\n\xff\r\n\0', 'latin1').copy(this.buf, 0);
  }

  get count(): number {
    return this.rows;
  }

  private room(n: number): void {
    if (this.p + n <= this.buf.length) return;
    this.buf = grownBuffer(this.buf, this.p, this.p + n);
    this.d = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
  }

  private f4(v: number): void {
    const d = this.d;
    if (v === v && v !== Infinity && v !== -Infinity) {
      d.setInt32(this.p, 4);
      d.setFloat32(this.p + 4, v);
      this.p += 8;
    } else {
      d.setInt32(this.p, -1);
      this.p += 4;
    }
  }

  private i2(v: number | null): void {
    if (v === null) {
      this.d.setInt32(this.p, -1);
      this.p += 4;
      return;
    }
    this.d.setInt32(this.p, 2);
    this.d.setInt16(this.p + 4, v);
    this.p += 6;
  }

  private i4(v: number | null): void {
    if (v === null) {
      this.d.setInt32(this.p, -1);
      this.p += 4;
      return;
    }
    this.d.setInt32(this.p, 4);
    this.d.setInt32(this.p + 4, v);
    this.p += 8;
  }

  private bool(v: boolean): void {
    this.d.setInt32(this.p, 1);
    this.buf[this.p + 4] = v ? 1 : 0;
    this.p += 5;
  }

  /** real[] (non-finite elements NULL), or NULL. */
  private f4Array(values: ArrayLike<number> | null): void {
    if (values === null) {
      this.d.setInt32(this.p, -1);
      this.p += 4;
      return;
    }
    this.p = writeFloat4ArrayField(this.d, this.p, values, values.length);
  }

  private i2Array(values: ArrayLike<number>): void {
    const d = this.d;
    const lenAt = this.p;
    const n = values.length;
    d.setInt32(lenAt + 4, 1);
    d.setInt32(lenAt + 8, 0);
    d.setInt32(lenAt + 12, 21);
    d.setInt32(lenAt + 16, n);
    d.setInt32(lenAt + 20, 1);
    let p = lenAt + 24;
    for (let i = 0; i < n; i++) {
      d.setInt32(p, 2);
      d.setInt16(p + 4, values[i]);
      p += 6;
    }
    d.setInt32(lenAt, p - lenAt - 4);
    this.p = p;
  }

  add(a: AnalysisRow, unitId: string = this.unitId): void {
    if (unitId !== this.unitOf) {
      this.unitOf = unitId;
      this.unitBytes = Buffer.from(unitId, 'utf8');
    }
    const arrays = a.validity.length + a.tcDeviation.length + (a.tcResidual?.length ?? 0) + a.chamberDeviation.length + a.chamberUncertainty.length + (a.chamberResidual?.length ?? 0);
    const json = a.findingsJson;
    this.room(2 + 35 * 8 + this.unitBytes.length + 6 * 24 + 8 * arrays + (json === null ? 0 : 3 * json.length + 1) + 2);
    const d = this.d;
    d.setInt16(this.p, ANALYSIS_FIELD_COUNT);
    this.p += 2;
    d.setInt32(this.p, this.unitBytes.length);
    this.unitBytes.copy(this.buf, this.p + 4);
    this.p += 4 + this.unitBytes.length;
    // Microseconds since 2000 as two 32-bit words (exact below 2^53; no BigInt per row).
    const us = Math.round((a.tsMs - PG_EPOCH_MS) * 1000);
    const hi = Math.floor(us / TWO_32);
    d.setInt32(this.p, 8);
    d.setInt32(this.p + 4, hi);
    d.setUint32(this.p + 8, us - hi * TWO_32);
    this.p += 12;
    this.i4(a.configVersion);
    this.i4(a.baselineVersion);
    this.f4(a.loadFraction);
    this.bool(a.steady);
    this.f4(a.spread);
    this.f4(a.spreadExcl1);
    this.f4(a.spreadExcl2);
    this.f4(a.spreadLimit);
    this.bool(a.limitFromBaseline);
    this.f4(a.ringMean);
    this.f4(a.robustCentre);
    this.f4(a.stdDev);
    this.i2(a.hottestTc);
    this.i2(a.coldestTc);
    this.i2(a.secondColdestTc);
    this.bool(a.coldestAdjacent);
    this.i2(a.validCount);
    this.bool(a.coverageDegraded);
    this.i2Array(a.validity);
    this.f4Array(a.tcDeviation);
    this.f4Array(a.tcResidual);
    this.f4(a.swirlDeg);
    this.f4Array(a.chamberDeviation);
    this.f4Array(a.chamberUncertainty);
    this.f4Array(a.chamberResidual);
    this.f4(a.ringLevel);
    this.f4(a.fitSd);
    this.i2(a.worstChamber);
    this.f4(a.worstLikelihood);
    this.i2(a.runnerUpChamber);
    this.f4(a.runnerUpLikelihood);
    this.i2(a.worstGrade);
    if (json === null) {
      d.setInt32(this.p, -1);
      this.p += 4;
    } else {
      const n = this.buf.write(json, this.p + 5, 'utf8');
      d.setInt32(this.p, n + 1);
      this.buf[this.p + 4] = 1;
      this.p += 5 + n;
    }
    this.rows++;
    const span = this.spans.get(unitId);
    if (!span) this.spans.set(unitId, [a.tsMs, a.tsMs]);
    else {
      if (a.tsMs < span[0]) span[0] = a.tsMs;
      if (a.tsMs > span[1]) span[1] = a.tsMs;
    }
  }

  /** The finished body (a view of the internal buffer). */
  finish(): Buffer {
    this.room(2);
    this.d.setInt16(this.p, -1);
    return this.buf.subarray(0, this.p + 2);
  }
}

/**
 * Writes the encoded rows, replacing any analysis of each unit in the span it writes (delete
 * then COPY): writing the same span twice leaves one row per ring.
 */
export async function writeAnalysis(client: pg.ClientBase, pool: object, enc: AnalysisEncoder): Promise<void> {
  if (enc.count === 0) return;
  const spans = [...enc.spans.entries()];
  const lo = Math.min(...spans.map(([, s]) => s[0]));
  const hi = Math.max(...spans.map(([, s]) => s[1]));
  await ensureAnalysisPartitions(client, pool, lo, hi);
  // The spans as constants, so the planner keeps only the partitions they reach (a join with
  // an array of spans would visit every month's partition).
  const where = spans.map(([u, [a, b]]) => `(unit_id = ${lit(u)} AND ts >= ${tsLit(a)} AND ts <= ${tsLit(b)})`).join(' OR ');
  await client.query(`DELETE FROM ring_analysis WHERE ${where}`);
  await copyIn(client, 'ring_analysis', ANALYSIS_COLUMNS, enc.finish());
}

// ---------------------------------------------------------------------------------------------
// Progress, claims check and the batch log.

export interface UnitProgress {
  watermarkMs: number | null;
  /** Stored rollups hold the in-order analysis up to this ring time (-Infinity: none). */
  rollupsToMs: number;
  lateCheckedFromMs: number;
  ringsAnalysed: number;
  lateRingsAnalysed: number;
}

/** rollups_to in ms (NULL for -infinity, which extract() cannot turn into a finite number). */
const RU_MS = (t: string) => `CASE WHEN ${t}.rollups_to = '-infinity' THEN NULL ELSE ${msOf(`${t}.rollups_to`)} END AS ru_ms`;
const rollupsMs = (v: unknown) => (v === null || v === undefined ? -Infinity : Number(v));

/**
 * Inside the caller's transaction: locks the unit's claim row if this worker holds a live
 * lease on it and returns the unit's progress; null when the lease is not (or no longer) ours.
 */
export async function lockOwnedUnit(client: pg.ClientBase, unitId: string, workerId: string): Promise<UnitProgress | null> {
  const { rows } = await client.query(
    `SELECT ${msOf('p.watermark_ts')} AS wm_ms, ${RU_MS('p')}, ${msOf('p.late_checked_from')} AS late_ms, p.rings_analysed, p.late_rings_analysed
       FROM unit_claims c JOIN analysis_progress p USING (unit_id)
      WHERE c.unit_id = $1 AND c.worker_id = $2 AND c.lease_until > now()
      FOR UPDATE OF c`,
    [unitId, workerId],
  );
  if (rows.length === 0) return null;
  const r = rows[0];
  return {
    watermarkMs: r.wm_ms === null ? null : Number(r.wm_ms),
    rollupsToMs: rollupsMs(r.ru_ms),
    lateCheckedFromMs: Number(r.late_ms),
    ringsAnalysed: Number(r.rings_analysed),
    lateRingsAnalysed: Number(r.late_rings_analysed),
  };
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
          `SELECT p.unit_id, ${msOf('p.watermark_ts')} AS wm_ms, ${RU_MS('p')}, ${msOf('p.late_checked_from')} AS late_ms, p.rings_analysed, p.late_rings_analysed
             FROM analysis_progress p WHERE p.unit_id = ANY($1::text[]) ORDER BY p.unit_id FOR UPDATE`,
          [unitIds],
        )
      : await client.query(
          `WITH l AS (SELECT c.unit_id FROM unit_claims c JOIN analysis_progress p USING (unit_id)
                       WHERE c.unit_id = ANY($1::text[]) AND c.worker_id = $2 AND c.lease_until > now()
                       ORDER BY c.unit_id FOR UPDATE OF c),
                e AS (UPDATE unit_claims c SET lease_until = greatest(c.lease_until, now() + make_interval(secs => $3))
                        FROM l WHERE c.unit_id = l.unit_id AND $3 > 0 AND c.lease_until < now() + make_interval(secs => $3 * 2 / 3.0) RETURNING c.unit_id)
           SELECT p.unit_id, ${msOf('p.watermark_ts')} AS wm_ms, ${RU_MS('p')}, ${msOf('p.late_checked_from')} AS late_ms, p.rings_analysed, p.late_rings_analysed
             FROM l JOIN analysis_progress p USING (unit_id) ORDER BY p.unit_id`,
          [unitIds, workerId, leaseS],
        );
  const out = new Map<string, UnitProgress>();
  for (const r of rows) {
    out.set(r.unit_id, {
      watermarkMs: r.wm_ms === null ? null : Number(r.wm_ms),
      rollupsToMs: rollupsMs(r.ru_ms),
      lateCheckedFromMs: Number(r.late_ms),
      ringsAnalysed: Number(r.rings_analysed),
      lateRingsAnalysed: Number(r.late_rings_analysed),
    });
  }
  return out;
}

/** Inside the caller's transaction: locks the unit's progress row without a lease check (tools and tests). */
export async function lockProgress(client: pg.ClientBase, unitId: string): Promise<UnitProgress | null> {
  const { rows } = await client.query(
    `SELECT ${msOf('watermark_ts')} AS wm_ms, ${RU_MS('analysis_progress')}, ${msOf('late_checked_from')} AS late_ms, rings_analysed, late_rings_analysed
       FROM analysis_progress WHERE unit_id = $1 FOR UPDATE`,
    [unitId],
  );
  if (rows.length === 0) return null;
  const r = rows[0];
  return { watermarkMs: r.wm_ms === null ? null : Number(r.wm_ms), rollupsToMs: rollupsMs(r.ru_ms), lateCheckedFromMs: Number(r.late_ms), ringsAnalysed: Number(r.rings_analysed), lateRingsAnalysed: Number(r.late_rings_analysed) };
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
  batches: { unitId: string; fromMs: number; toMs: number; rings: number; rollupsToMs?: number | null }[],
): Promise<void> {
  if (batches.length === 0) return;
  const ids = batches.map((b) => b.unitId);
  const from = batches.map((b) => isoMicros(b.fromMs));
  const to = batches.map((b) => isoMicros(b.toMs));
  const n = batches.map((b) => b.rings);
  const ru = batches.map((b) => (b.rollupsToMs === undefined || b.rollupsToMs === null ? null : isoMicros(b.rollupsToMs)));
  await client.query(
    `WITH b AS (SELECT * FROM unnest($1::text[], $2::timestamptz[], $3::timestamptz[], $4::int[], $6::timestamptz[]) AS b(unit_id, from_ts, to_ts, rings, rollups_to)),
          p AS (UPDATE analysis_progress p
                   SET watermark_ts = greatest(coalesce(p.watermark_ts, '-infinity'), b.to_ts), rings_analysed = p.rings_analysed + b.rings, updated_at = now(),
                       rollups_to = CASE WHEN b.rollups_to IS NULL THEN p.rollups_to ELSE greatest(p.rollups_to, b.rollups_to) END
                  FROM b WHERE p.unit_id = b.unit_id)
     INSERT INTO analysis_batches (unit_id, worker_id, kind, from_ts, to_ts, rings) SELECT unit_id, $5, 'in_order', from_ts, to_ts, rings FROM b`,
    [ids, from, to, n, workerId, ru],
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

/** Time of a unit's first analysed ring after afterMs (-Infinity: from the start), or null. */
export async function firstAnalysisAfter(client: Queryable, unitId: string, afterMs: number): Promise<number | null> {
  const { rows } = await client.query(
    Number.isFinite(afterMs)
      ? { text: `SELECT ${msOf('min(ts)')} AS t FROM ring_analysis WHERE unit_id = $1 AND ts > $2`, values: [unitId, isoMicros(afterMs)] }
      : { text: `SELECT ${msOf('min(ts)')} AS t FROM ring_analysis WHERE unit_id = $1`, values: [unitId] },
  );
  return rows[0].t === null ? null : Number(rows[0].t);
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

/**
 * Late rings: stored rings of the given units, received at or after the unit's
 * late_checked_from, at or before its watermark, without analysis. Per unit, their times
 * (oldest first, at most perUnitLimit).
 */
export async function findLateRings(q: Queryable, unitIds: string[], perUnitLimit: number): Promise<Map<string, number[]>> {
  const out = new Map<string, number[]>();
  if (unitIds.length === 0) return out;
  const { rows } = await q.query(
    `WITH u AS (SELECT unit_id, late_checked_from AS since, watermark_ts AS wm FROM analysis_progress
                 WHERE unit_id = ANY($1::text[]) AND watermark_ts IS NOT NULL),
          lo AS (SELECT min(since) AS since FROM u)
     SELECT r.unit_id, array_agg(${msOf('r.ts')} ORDER BY r.ts) AS ts
       FROM rings r JOIN u ON u.unit_id = r.unit_id
      WHERE r.received_at >= (SELECT since FROM lo) AND r.received_at >= u.since AND r.ts <= u.wm
        AND NOT EXISTS (SELECT 1 FROM ring_analysis a WHERE a.unit_id = r.unit_id AND a.ts = r.ts)
      GROUP BY r.unit_id`,
    [unitIds],
  );
  for (const r of rows) {
    const ts = (r.ts as (string | number)[]).map(Number);
    out.set(r.unit_id, ts.slice(0, perUnitLimit));
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

// ---------------------------------------------------------------------------------------------
// Reading analysis back (state rebuild, rollup recompute, baselines).

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
    `SELECT load_fraction, ring_mean, spread, tc_deviation, chamber_deviation FROM ring_analysis WHERE unit_id = ${lit(unitId)} AND ts >= ${tsLit(fromMs)} AND ts < ${tsLit(toMs)} AND steady${sample} ORDER BY ts`,
  );
  const r = new CopyBinaryReader(body);
  const arena = r.arena();
  const load: number[] = [];
  const mean: number[] = [];
  const spread: number[] = [];
  const tcDev: Float64Array[] = [];
  const chDev: Float64Array[] = [];
  while (r.nextRow() > 0) {
    load.push(r.float4());
    mean.push(r.float4());
    spread.push(r.float4());
    tcDev.push(r.numberArray(arena) ?? new Float64Array(0));
    chDev.push(r.numberArray(arena) ?? new Float64Array(0));
  }
  return { count: load.length, loadFraction: Float64Array.from(load), ringMean: Float64Array.from(mean), spread: Float64Array.from(spread), tcDeviation: tcDev, chamberDeviation: chDev };
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

// ---------------------------------------------------------------------------------------------
// Rollups.

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

// ---------------------------------------------------------------------------------------------
// Status and progress for people.

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

export interface AnalysisProgressInfo {
  lastRingTs: Date | null;
  ringsStored: number;
  ringsAnalysed: number;
  watermarkTs: Date | null;
  ringsAnalysedInOrder: number;
  lateRingsAnalysed: number;
  workerId: string | null;
  leaseUntil: Date | null;
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
