/**
 * Rings repository: every query about the ring table. Writing goes through PostgreSQL's binary
 * COPY (no text formatting or parsing of readings on either side); reading returns readings as
 * Float64Array in time order. Validation is not done here: rows arrive already checked.
 */
import { once } from 'node:events';
import pg from 'pg';
import { from as copyFrom } from 'pg-copy-streams';
import { grownBuffer, isoMicros, writeFloat4ArrayField } from './pg-binary.ts';

/** LISTEN channel told, after each commit, which units got new rings. */
export const NEW_RINGS_CHANNEL = 'cansight_new_rings';
/** A NOTIFY payload must stay under 8000 bytes; beyond this the payload is '*' (every unit). */
export const NOTIFY_PAYLOAD_MAX_BYTES = 7900;

/** One validated ring, ready to store. Temperatures in °C; NaN in exhaustC is a missing reading. */
export interface RingRow {
  unitId: string;
  tsMs: number;
  loadMw: number;
  ambientC: number;
  ambientKPa: number;
  speedPct: number;
  cdtC: number | null;
  cdpKPa: number | null;
  fuelFlowKgS: number | null;
  flameDetected: boolean | null;
  /** Thermocouple readings in thermocouple order (index 0 = thermocouple 1). */
  exhaustC: ArrayLike<number>;
  /** Combustion mode code the site sent (1–16 characters); null or left out: none. */
  mode?: string | null;
}

export const RING_COLUMNS = 'unit_id, ts, load_mw, ambient_c, ambient_kpa, speed_pct, cdt_c, cdp_kpa, fuel_flow_kg_s, flame_detected, exhaust_c, mode';
const FIELD_COUNT = 12;
/** Microseconds between 1970-01-01 and PostgreSQL's epoch 2000-01-01 (UTC), in ms. */
const PG_EPOCH_MS = 946_684_800_000;
const SIGNATURE = Buffer.from('PGCOPY\n\xff\r\n\0', 'latin1');
const TWO_32 = 4_294_967_296;

export interface UnitSpan {
  unitId: string;
  loMs: number;
  hiMs: number;
  lastMs: number;
  increasing: boolean;
}

/**
 * Builds the body of a binary COPY of ring rows (header, tuples, trailer) into one growing
 * buffer. One encoder per chunk; reset() reuses the buffer for the next chunk.
 */
export class RingCopyEncoder {
  private buf: Buffer;
  private view: DataView;
  private pos = 0;
  count = 0;
  /** Per unit in this chunk: earliest and latest ts, and whether ts only ever increased. */
  readonly units = new Map<string, UnitSpan>();
  /** Months present in this chunk, as year·12 + month (UTC, month from 0). */
  readonly months = new Set<number>();
  private lastSpan: UnitSpan | null = null;
  private monthFrom = 0;
  private monthTo = -1;
  /** The unit id of the last row and its UTF-8 bytes (rows of one unit usually come together). */
  private lastId = '';
  private lastIdBytes: Buffer = Buffer.alloc(0);

  constructor(initialBytes = 1 << 20) {
    this.buf = Buffer.allocUnsafe(Math.max(64, initialBytes));
    this.view = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
    this.reset();
  }

  reset(): void {
    this.pos = 0;
    this.count = 0;
    this.units.clear();
    this.months.clear();
    this.lastSpan = null;
    this.monthTo = -1;
    SIGNATURE.copy(this.buf, 0);
    this.view.setInt32(11, 0); // flags
    this.view.setInt32(15, 0); // header extension length
    this.pos = 19;
  }

  get bytes(): number {
    return this.pos;
  }

  private room(n: number): void {
    if (this.pos + n <= this.buf.length) return;
    this.buf = grownBuffer(this.buf, this.pos, this.pos + n);
    this.view = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
  }

  private track(unitId: string, tsMs: number): void {
    let span = this.lastSpan;
    if (span === null || span.unitId !== unitId) {
      span = this.units.get(unitId) ?? null;
      if (span === null) {
        span = { unitId, loMs: tsMs, hiMs: tsMs, lastMs: -Infinity, increasing: true };
        this.units.set(unitId, span);
      }
      this.lastSpan = span;
    }
    if (tsMs <= span.lastMs) span.increasing = false;
    span.lastMs = tsMs;
    if (tsMs < span.loMs) span.loMs = tsMs;
    if (tsMs > span.hiMs) span.hiMs = tsMs;
    if (tsMs < this.monthFrom || tsMs >= this.monthTo) {
      const d = new Date(tsMs);
      const y = d.getUTCFullYear();
      const m = d.getUTCMonth();
      this.months.add(y * 12 + m);
      this.monthFrom = Date.UTC(y, m, 1);
      this.monthTo = Date.UTC(y, m + 1, 1);
    }
  }

  add(r: RingRow): void {
    this.track(r.unitId, r.tsMs);
    if (r.unitId !== this.lastId) {
      this.lastId = r.unitId;
      this.lastIdBytes = Buffer.from(r.unitId, 'utf8');
    }
    const id = this.lastIdBytes;
    const n = r.exhaustC.length;
    const mode = r.mode ?? null;
    const modeBytes = mode === null ? 0 : Buffer.byteLength(mode, 'utf8');
    this.room(2 + 4 + id.length + 12 + 8 * 7 + 5 + 4 + 20 + 8 * n + 4 + modeBytes);
    const d = this.view;
    let p = this.pos;
    d.setInt16(p, FIELD_COUNT);
    d.setInt32(p + 2, id.length);
    p += 6;
    for (let i = 0; i < id.length; i++) this.buf[p + i] = id[i];
    p += id.length;
    // timestamptz: int64 microseconds since 2000-01-01 UTC, written as two 32-bit halves.
    const us = (r.tsMs - PG_EPOCH_MS) * 1000;
    const hi = Math.floor(us / TWO_32);
    d.setInt32(p, 8);
    d.setInt32(p + 4, hi);
    d.setUint32(p + 8, us - hi * TWO_32);
    p += 12;
    d.setInt32(p, 4);
    d.setFloat32(p + 4, r.loadMw);
    d.setInt32(p + 8, 4);
    d.setFloat32(p + 12, r.ambientC);
    d.setInt32(p + 16, 4);
    d.setFloat32(p + 20, r.ambientKPa);
    d.setInt32(p + 24, 4);
    d.setFloat32(p + 28, r.speedPct);
    p += 32;
    p = nullableFloat4(d, p, r.cdtC);
    p = nullableFloat4(d, p, r.cdpKPa);
    p = nullableFloat4(d, p, r.fuelFlowKgS);
    if (r.flameDetected === null) {
      d.setInt32(p, -1);
      p += 4;
    } else {
      d.setInt32(p, 1);
      d.setUint8(p + 4, r.flameDetected ? 1 : 0);
      p += 5;
    }
    p = writeFloat4ArrayField(d, p, r.exhaustC, n);
    if (mode === null) {
      d.setInt32(p, -1);
      p += 4;
    } else {
      d.setInt32(p, modeBytes);
      this.buf.write(mode, p + 4, modeBytes, 'utf8');
      p += 4 + modeBytes;
    }
    this.pos = p;
    this.count++;
  }

  /** The finished COPY body (a view of the internal buffer, valid until the next reset or add). */
  finish(): Buffer {
    this.room(2);
    this.view.setInt16(this.pos, -1);
    return this.buf.subarray(0, this.pos + 2);
  }
}

/** A float4 field, or NULL; returns the position after it. */
function nullableFloat4(d: DataView, p: number, v: number | null): number {
  if (v === null) {
    d.setInt32(p, -1);
    return p + 4;
  }
  d.setInt32(p, 4);
  d.setFloat32(p + 4, v);
  return p + 8;
}

/**
 * Sends one binary COPY body to `COPY target (columns) FROM STDIN`, optionally with statements
 * before and after it in the same simple query (they run in order; an error skips the rest).
 */
export async function copyBinary(client: pg.ClientBase, target: string, body: Buffer, before = '', after = ''): Promise<void> {
  const stream = client.query(copyFrom(`${before}COPY ${target} (${RING_COLUMNS}) FROM STDIN (FORMAT binary)${after}`));
  const done = once(stream, 'finish');
  stream.end(body);
  await done;
}

const STAGE = 'cansight_ring_stage';

/** Months known to have a partition, per pool (one pool per database). Filled after commits. */
const knownMonths = new WeakMap<pg.Pool, Set<number>>();

function monthStartIso(month: number): string {
  return new Date(Date.UTC(Math.floor(month / 12), month % 12, 1)).toISOString();
}

export interface ChunkResult {
  accepted: number;
  duplicates: number;
}

/**
 * One write of rings that commits as a whole: a connection holding one transaction, into which
 * chunks of rows are copied as they arrive. Nothing is visible to others before commit(); an
 * error or rollback() leaves nothing behind.
 *
 * Per chunk: when each unit's times in the chunk only increase, the chunk is copied straight
 * into the ring table under a savepoint, in the same round trip as a check that no stored ring
 * of the chunk's units falls inside the chunk's time span (a stored ring there, or one written
 * meanwhile by another request, ends that attempt with a unique violation, and the chunk goes
 * the slow way); otherwise it is copied into a session-local staging table and moved with
 * INSERT … SELECT … ON CONFLICT DO NOTHING in key order, which counts the duplicates.
 * BEGIN goes out with the first statement that needs it, and NOTIFY with COMMIT, so a write
 * of one chunk costs two round trips.
 * A month without a partition gets one inside the transaction through ensure_ring_partitions
 * (migration 0003), which attaches it with a lock that does not stop other writers or readers.
 */
export class RingWrite {
  private finished = false;
  private begun = false;
  private readonly created = new Set<number>();
  private readonly notifyUnits = new Set<string>();
  private readonly onError = (err: Error) => {
    this.lostConnection = err;
  };
  private lostConnection: Error | null = null;

  private constructor(private readonly pool: pg.Pool, private readonly client: pg.PoolClient) {
    client.on('error', this.onError);
  }

  /** Takes a connection for a write; the transaction begins with its first statement. */
  static async open(pool: pg.Pool): Promise<RingWrite> {
    return new RingWrite(pool, await pool.connect());
  }

  /** 'BEGIN; ' the first time a statement of this write is sent, then ''. */
  private begin(): string {
    if (this.begun) return '';
    this.begun = true;
    return 'BEGIN; ';
  }

  private async ensureBegun(): Promise<void> {
    if (!this.begun) await this.client.query(this.begin().trim());
  }

  /** Runs a read query on this write's connection (inside its transaction). */
  async query<R extends pg.QueryResultRow = Record<string, unknown>>(text: string, values?: unknown[]): Promise<pg.QueryResult<R>> {
    this.assertUsable();
    await this.ensureBegun();
    return this.client.query<R>(text, values);
  }

  /** The connection inside this write's transaction, for repositories that read through it. */
  async connection(): Promise<pg.ClientBase> {
    this.assertUsable();
    await this.ensureBegun();
    return this.client;
  }

  private assertUsable(): void {
    if (this.finished) throw new Error('this ring write is already finished');
    if (this.lostConnection) throw this.lostConnection;
  }

  private async ensureMonths(months: Set<number>): Promise<void> {
    let known = knownMonths.get(this.pool);
    if (!known) knownMonths.set(this.pool, (known = new Set()));
    for (const month of months) {
      if (known.has(month) || this.created.has(month)) continue;
      // A partition made here is not committed yet: it is known to the process only after COMMIT.
      await this.ensureBegun();
      const { rows } = await this.client.query('SELECT ensure_ring_partitions($1, $1) AS made', [monthStartIso(month)]);
      if (Number(rows[0].made) > 0) this.created.add(month);
      else known.add(month);
    }
  }

  /**
   * A statement that fails with a unique violation when a stored ring of one of the chunk's
   * units lies inside that unit's time span in the chunk; null when some unit's times do not
   * only increase (the chunk may hold a ring twice: straight to the slow way).
   */
  private spanCheck(enc: RingCopyEncoder): string | null {
    const ids: string[] = [];
    const lo: string[] = [];
    const hi: string[] = [];
    for (const span of enc.units.values()) {
      if (!span.increasing) return null;
      ids.push(pg.escapeLiteral(span.unitId));
      lo.push(`'${isoMicros(span.loMs)}'`);
      hi.push(`'${isoMicros(span.hiMs)}'`);
    }
    const body = `BEGIN IF EXISTS (SELECT 1 FROM unnest(ARRAY[${ids.join(',')}]::text[], ARRAY[${lo.join(',')}]::timestamptz[], ARRAY[${hi.join(',')}]::timestamptz[]) AS u(unit_id, lo, hi)
       WHERE EXISTS (SELECT 1 FROM rings r WHERE r.unit_id = u.unit_id AND r.ts BETWEEN u.lo AND u.hi))
     THEN RAISE EXCEPTION USING ERRCODE = 'unique_violation', MESSAGE = 'a stored ring lies inside the time span of this chunk'; END IF; END`;
    // Unit ids are quoted literals; the block's own quote tag must not occur inside it.
    return body.includes('$span$') ? null : `DO $span$ ${body} $span$`;
  }

  private async staged(body: Buffer, count: number): Promise<ChunkResult> {
    await this.ensureBegun();
    await this.client.query(`CREATE TEMP TABLE IF NOT EXISTS ${STAGE} (LIKE rings INCLUDING DEFAULTS) ON COMMIT DELETE ROWS`);
    await copyBinary(this.client, STAGE, body);
    const { rows } = await this.client.query<{ unit_id: string; n: number }>(
      // In key order, as the straight copies of other writes go (times only increasing), so two
      // writes of the same rings wait for each other instead of deadlocking.
      `WITH ins AS (INSERT INTO rings (${RING_COLUMNS}) SELECT ${RING_COLUMNS} FROM ${STAGE} ORDER BY unit_id, ts ON CONFLICT DO NOTHING RETURNING unit_id)
       SELECT unit_id, count(*)::int AS n FROM ins GROUP BY unit_id`,
    );
    await this.client.query(`TRUNCATE ${STAGE}`);
    let accepted = 0;
    for (const r of rows) {
      accepted += r.n;
      this.notifyUnits.add(r.unit_id);
    }
    return { accepted, duplicates: count - accepted };
  }

  /** Writes the encoder's rows (the encoder may be reset afterwards). */
  async write(enc: RingCopyEncoder): Promise<ChunkResult> {
    this.assertUsable();
    const count = enc.count;
    if (count === 0) return { accepted: 0, duplicates: 0 };
    await this.ensureMonths(enc.months);
    const body = enc.finish();
    const check = this.spanCheck(enc);
    if (check !== null) {
      // One round trip: savepoint, span check, COPY, release (a simple query may hold a COPY;
      // an error skips the rest of it).
      const begin = this.begin();
      try {
        await copyBinary(this.client, 'rings', body, `${begin}SAVEPOINT cansight_chunk; ${check}; `, '; RELEASE SAVEPOINT cansight_chunk');
        for (const id of enc.units.keys()) this.notifyUnits.add(id);
        return { accepted: count, duplicates: 0 };
      } catch (err) {
        // A ring stored already (23505), or a deadlock with another write of the same rings
        // in another order (40P01): undo this attempt and take the slow way.
        const code = (err as { code?: string }).code;
        if (code !== '23505' && code !== '40P01') throw err;
        await this.client.query('ROLLBACK TO SAVEPOINT cansight_chunk');
      }
    }
    return this.staged(body, count);
  }

  /** Commits; after it returns every written ring is durable and the worker has been told. */
  async commit(): Promise<{ unitIds: string[] }> {
    this.assertUsable();
    const unitIds = [...this.notifyUnits].sort();
    try {
      if (this.begun) {
        let notify = '';
        if (unitIds.length) {
          let payload = JSON.stringify(unitIds);
          if (Buffer.byteLength(payload) > NOTIFY_PAYLOAD_MAX_BYTES) payload = '*';
          // Delivered by PostgreSQL only when the transaction commits.
          notify = `SELECT pg_notify(${pg.escapeLiteral(NEW_RINGS_CHANNEL)}, ${pg.escapeLiteral(payload)}); `;
        }
        await this.client.query(`${notify}COMMIT`);
      }
    } catch (err) {
      await this.rollback();
      throw err;
    }
    const known = knownMonths.get(this.pool);
    for (const m of this.created) known?.add(m);
    this.release(false);
    return { unitIds };
  }

  /** Abandons everything written; safe to call more than once and after a lost connection. */
  async rollback(): Promise<void> {
    if (this.finished) return;
    let broken = this.lostConnection !== null;
    if (!broken && this.begun) {
      try {
        await this.client.query('ROLLBACK');
      } catch {
        broken = true;
      }
    }
    this.release(broken);
  }

  private release(broken: boolean): void {
    if (this.finished) return;
    this.finished = true;
    this.client.removeListener('error', this.onError);
    this.client.release(broken || this.lostConnection !== null);
  }
}

/** A stored ring as read back: readings in °C, NaN where missing. */
export interface StoredRing extends RingRow {
  ts: Date;
  exhaustC: Float64Array;
  receivedAt: Date;
}

type TimeArg = Date | string | number;
const toDate = (t: TimeArg): Date => (t instanceof Date ? t : new Date(t));

/**
 * Rings of one unit with fromTs ≤ ts < toTs, oldest first, at most `limit`. Times may be Date,
 * RFC 3339 text or milliseconds since 1970.
 */
export async function readRings(pool: pg.Pool | pg.ClientBase, unitId: string, fromTs: TimeArg, toTs: TimeArg, limit: number): Promise<StoredRing[]> {
  const { rows } = await pool.query(
    `SELECT ${RING_COLUMNS}, received_at FROM rings WHERE unit_id = $1 AND ts >= $2 AND ts < $3 ORDER BY ts LIMIT $4`,
    [unitId, toDate(fromTs), toDate(toTs), Math.max(0, Math.floor(limit))],
  );
  return rows.map((r) => {
    const raw = r.exhaust_c as (number | null)[];
    const ex = new Float64Array(raw.length);
    for (let i = 0; i < raw.length; i++) ex[i] = raw[i] === null ? NaN : raw[i]!;
    const ts = r.ts as Date;
    return {
      unitId: r.unit_id,
      ts,
      tsMs: ts.getTime(),
      loadMw: r.load_mw,
      ambientC: r.ambient_c,
      ambientKPa: r.ambient_kpa,
      speedPct: r.speed_pct,
      cdtC: r.cdt_c,
      cdpKPa: r.cdp_kpa,
      fuelFlowKgS: r.fuel_flow_kg_s,
      flameDetected: r.flame_detected,
      mode: (r.mode as string | null) ?? null,
      exhaustC: ex,
      receivedAt: r.received_at,
    };
  });
}

/** Number of stored rings of a unit (all units when unitId is null). */
export async function countRings(pool: pg.Pool | pg.ClientBase, unitId: string | null = null): Promise<number> {
  const { rows } = await pool.query(`SELECT count(*)::int AS n FROM rings WHERE $1::text IS NULL OR unit_id = $1`, [unitId]);
  return rows[0].n;
}

/**
 * The floor of the write path: one binary COPY straight into the ring table in its own
 * transaction, no duplicate handling (a duplicate fails the whole COPY). For benchmarks and
 * trusted bulk loads into empty spans; partitions must exist.
 */
export async function copyRingsRaw(pool: pg.Pool, enc: RingCopyEncoder): Promise<void> {
  const client = await pool.connect();
  try {
    await copyBinary(client, 'rings', enc.finish());
  } finally {
    client.release();
  }
}

/** Earliest and latest ring time over these units, or null when none has a ring. */
export async function ringTimeSpan(pool: pg.Pool | pg.ClientBase, unitIds: string[]): Promise<{ firstMs: number; lastMs: number } | null> {
  const { rows } = await pool.query(`SELECT min(ts) AS first, max(ts) AS last FROM rings WHERE unit_id = ANY($1::text[])`, [unitIds]);
  const first = rows[0]?.first as Date | null;
  const last = rows[0]?.last as Date | null;
  return first && last ? { firstMs: first.getTime(), lastMs: last.getTime() } : null;
}
