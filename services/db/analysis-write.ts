/**
 * Analysis rows written: the monthly partitions of ring_analysis made as needed, the rows of a
 * batch (of one unit or several) encoded in place as one binary COPY body, and written in the
 * caller's transaction replacing whatever analysis the span had.
 */
import type pg from 'pg';
import { copyIn, grownBuffer, PG_EPOCH_MS, TWO_32, writeFloat4ArrayField } from './pg-binary.ts';
import { lit, tsLit } from './sql.ts';

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
