/**
 * PostgreSQL's binary COPY format, both ways, for the analysis write and read paths: a writer
 * that builds a COPY FROM body field by field into one growing buffer, and a reader that walks
 * the rows of a COPY TO body. No SQL here, only the wire format (header, tuples, trailer).
 * Types covered: text, int2, int4, float4, float8, bool, timestamptz, jsonb, and
 * one-dimensional float4[] / int2[] arrays with NULL elements.
 */
import { once } from 'node:events';
import type pg from 'pg';
import { from as copyFrom, to as copyTo } from 'pg-copy-streams';

const SIGNATURE = Buffer.from('PGCOPY\n\xff\r\n\0', 'latin1');
/** ms between 1970-01-01 and PostgreSQL's epoch 2000-01-01 (UTC). */
export const PG_EPOCH_MS = 946_684_800_000;
export const TWO_32 = 4_294_967_296;
const FLOAT4_OID = 700;
const INT2_OID = 21;

/** A buffer of at least `need` bytes (doubling `buf`'s size) holding `buf`'s first `used` bytes. */
export function grownBuffer(buf: Buffer, used: number, need: number): Buffer<ArrayBuffer> {
  let size = buf.length * 2;
  while (size < need) size *= 2;
  const next = Buffer.allocUnsafe(size);
  buf.copy(next, 0, 0, used);
  return next;
}

/**
 * Writes a real[] field (its length word, a one-dimensional array header and the first n
 * values, missing and non-finite ones as NULL elements) at `at`, where the caller has made room for
 * 24 + 8·n bytes. Returns the position after it.
 */
export function writeFloat4ArrayField(d: DataView, at: number, values: ArrayLike<number | null>, n: number): number {
  const start = at + 4;
  d.setInt32(start, 1);
  d.setInt32(start + 8, FLOAT4_OID);
  d.setInt32(start + 12, n);
  d.setInt32(start + 16, 1);
  let p = start + 20;
  let hasNull = 0;
  for (let i = 0; i < n; i++) {
    const v = values[i];
    if (v !== null && v === v && v !== Infinity && v !== -Infinity) {
      d.setInt32(p, 4);
      d.setFloat32(p + 4, v);
      p += 8;
    } else {
      d.setInt32(p, -1);
      p += 4;
      hasNull = 1;
    }
  }
  d.setInt32(start + 4, hasNull);
  d.setInt32(at, p - start);
  return p;
}

export class CopyBinaryWriter {
  private buf: Buffer;
  private view: DataView;
  private pos = 0;
  rows = 0;

  constructor(initialBytes = 1 << 20) {
    this.buf = Buffer.alloc(initialBytes);
    this.view = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
    this.reset();
  }

  reset(): void {
    SIGNATURE.copy(this.buf, 0);
    this.buf.writeInt32BE(0, 11);
    this.buf.writeInt32BE(0, 15);
    this.pos = 19;
    this.rows = 0;
  }

  private room(n: number): void {
    if (this.pos + n <= this.buf.length) return;
    this.buf = grownBuffer(this.buf, this.pos, this.pos + n);
    this.view = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
  }

  row(fields: number): void {
    this.room(2);
    this.buf.writeInt16BE(fields, this.pos);
    this.pos += 2;
    this.rows++;
  }

  null(): void {
    this.room(4);
    this.buf.writeInt32BE(-1, this.pos);
    this.pos += 4;
  }

  text(s: string): void {
    const n = Buffer.byteLength(s, 'utf8');
    this.room(4 + n);
    this.buf.writeInt32BE(n, this.pos);
    this.buf.write(s, this.pos + 4, 'utf8');
    this.pos += 4 + n;
  }

  jsonb(s: string | null): void {
    if (s === null) return this.null();
    const n = Buffer.byteLength(s, 'utf8');
    this.room(5 + n);
    this.buf.writeInt32BE(n + 1, this.pos);
    this.buf[this.pos + 4] = 1;
    this.buf.write(s, this.pos + 5, 'utf8');
    this.pos += 5 + n;
  }

  int2(v: number | null): void {
    if (v === null) return this.null();
    this.room(6);
    this.buf.writeInt32BE(2, this.pos);
    this.buf.writeInt16BE(v, this.pos + 4);
    this.pos += 6;
  }

  int4(v: number | null): void {
    if (v === null) return this.null();
    this.room(8);
    this.buf.writeInt32BE(4, this.pos);
    this.buf.writeInt32BE(v, this.pos + 4);
    this.pos += 8;
  }

  /** A float4; NaN and ±Infinity are written as NULL. */
  float4(v: number | null): void {
    if (v === null || !Number.isFinite(v)) return this.null();
    this.room(8);
    this.view.setInt32(this.pos, 4);
    this.view.setFloat32(this.pos + 4, v);
    this.pos += 8;
  }

  bool(v: boolean | null): void {
    if (v === null) return this.null();
    this.room(5);
    this.buf.writeInt32BE(1, this.pos);
    this.buf[this.pos + 4] = v ? 1 : 0;
    this.pos += 5;
  }

  timestamptz(ms: number): void {
    this.room(12);
    const us = Math.round((ms - PG_EPOCH_MS) * 1000);
    const hi = Math.floor(us / TWO_32);
    this.buf.writeInt32BE(8, this.pos);
    this.buf.writeInt32BE(hi, this.pos + 4);
    this.buf.writeUInt32BE(us - hi * TWO_32, this.pos + 8);
    this.pos += 12;
  }

  /** real[] of the first n values; non-finite elements are NULL. */
  float4Array(values: ArrayLike<number>, n = values.length): void {
    this.room(4 + 20 + 8 * n);
    this.pos = writeFloat4ArrayField(this.view, this.pos, values, n);
  }

  /** smallint[] of the first n values. */
  int2Array(values: ArrayLike<number>, n = values.length): void {
    this.room(4 + 20 + 6 * n);
    const d = this.view;
    const lenAt = this.pos;
    const start = this.pos + 4;
    d.setInt32(start, 1);
    d.setInt32(start + 4, 0);
    d.setInt32(start + 8, INT2_OID);
    d.setInt32(start + 12, n);
    d.setInt32(start + 16, 1);
    let p = start + 20;
    for (let i = 0; i < n; i++) {
      d.setInt32(p, 2);
      d.setInt16(p + 4, values[i]);
      p += 6;
    }
    d.setInt32(lenAt, p - start);
    this.pos = p;
  }

  /** The finished body (a view of the internal buffer, valid until the next reset or write). */
  finish(): Buffer {
    this.room(2);
    this.buf.writeInt16BE(-1, this.pos);
    return this.buf.subarray(0, this.pos + 2);
  }
}

/** Reads the fields of binary COPY rows in order. */
export class CopyBinaryReader {
  private pos: number;
  private end = 0;
  private view: DataView | undefined;

  constructor(private readonly buf: Buffer) {
    if (buf.length < 19 || !buf.subarray(0, 11).equals(SIGNATURE)) throw new Error('not a binary COPY body');
    this.pos = 19 + buf.readInt32BE(15);
  }

  /** Starts the next row: its field count, or -1 at the end. */
  nextRow(): number {
    if (this.pos + 2 > this.buf.length) return -1;
    const n = this.buf.readInt16BE(this.pos);
    this.pos += 2;
    return n;
  }

  /** Moves to the next field; its byte length, or -1 for NULL. */
  private field(): number {
    const len = this.buf.readInt32BE(this.pos);
    this.pos += 4;
    this.end = len < 0 ? this.pos : this.pos + len;
    return len;
  }

  skip(): void {
    this.field();
    this.pos = this.end;
  }

  text(): string | null {
    const len = this.field();
    if (len < 0) return null;
    const s = this.buf.toString('utf8', this.pos, this.end);
    this.pos = this.end;
    return s;
  }

  float4(): number {
    const len = this.field();
    if (len < 0) return NaN;
    const v = this.buf.readFloatBE(this.pos);
    this.pos = this.end;
    return v;
  }

  float8(): number {
    const len = this.field();
    if (len < 0) return NaN;
    const v = this.buf.readDoubleBE(this.pos);
    this.pos = this.end;
    return v;
  }

  int2(): number | null {
    const len = this.field();
    if (len < 0) return null;
    const v = this.buf.readInt16BE(this.pos);
    this.pos = this.end;
    return v;
  }

  int4(): number | null {
    const len = this.field();
    if (len < 0) return null;
    const v = this.buf.readInt32BE(this.pos);
    this.pos = this.end;
    return v;
  }

  bool(): boolean | null {
    const len = this.field();
    if (len < 0) return null;
    const v = this.buf[this.pos] !== 0;
    this.pos = this.end;
    return v;
  }

  /** timestamptz as ms since 1970 (NaN for NULL). */
  timestamptz(): number {
    const len = this.field();
    if (len < 0) return NaN;
    const hi = this.buf.readInt32BE(this.pos);
    const lo = this.buf.readUInt32BE(this.pos + 4);
    this.pos = this.end;
    return (hi * TWO_32 + lo) / 1000 + PG_EPOCH_MS;
  }

  /**
   * A one-dimensional numeric array (float4, float8, int2, int4) as Float64Array, NULL → NaN;
   * null for a NULL array. With an arena, the array is a view of the arena's buffer (one
   * allocation for a whole body's arrays instead of one per row).
   */
  numberArray(arena?: Float64Arena): Float64Array | null {
    const len = this.field();
    if (len < 0) return null;
    const b = this.buf;
    const ndim = b.readInt32BE(this.pos);
    const oid = b.readInt32BE(this.pos + 8);
    if (ndim === 0) {
      this.pos = this.end;
      return new Float64Array(0);
    }
    const n = b.readInt32BE(this.pos + 12);
    let p = this.pos + 12 + 8 * ndim;
    const out = arena ? arena.take(n) : new Float64Array(n);
    if (oid === FLOAT4_OID) {
      const d = (this.view ??= new DataView(b.buffer, b.byteOffset, b.byteLength));
      for (let i = 0; i < n; i++) {
        const l = d.getInt32(p);
        if (l < 0) {
          out[i] = NaN;
          p += 4;
        } else {
          out[i] = d.getFloat32(p + 4);
          p += 4 + l;
        }
      }
    } else {
      for (let i = 0; i < n; i++) {
        const l = b.readInt32BE(p);
        p += 4;
        if (l < 0) {
          out[i] = NaN;
          continue;
        }
        out[i] = oid === INT2_OID ? b.readInt16BE(p) : l === 8 ? b.readDoubleBE(p) : b.readInt32BE(p);
        p += l;
      }
    }
    this.pos = this.end;
    return out;
  }

  /** An arena for the number arrays left in the body: room for one element per bytesPerElement bytes (8: a float4 element with its length word); arrays past that get their own allocation. */
  arena(bytesPerElement = 8): Float64Arena {
    return new Float64Arena(Math.max(0, Math.floor((this.buf.length - this.pos) / bytesPerElement)));
  }
}

/** Hands out consecutive views of one Float64Array. */
export class Float64Arena {
  private readonly all: Float64Array;
  private used = 0;

  constructor(capacity: number) {
    this.all = new Float64Array(capacity);
  }

  take(n: number): Float64Array {
    if (this.used + n > this.all.length) return new Float64Array(n);
    const v = this.all.subarray(this.used, this.used + n);
    this.used += n;
    return v;
  }
}

/**
 * RFC 3339 text of a time in ms since 1970 kept to the microsecond (PostgreSQL's precision);
 * a Date would drop the fraction of a millisecond.
 */
export function isoMicros(ms: number): string {
  let whole = Math.floor(ms);
  let micro = Math.round((ms - whole) * 1000);
  if (micro >= 1000) {
    whole += 1;
    micro = 0;
  }
  return new Date(whole).toISOString().slice(0, -1) + String(micro).padStart(3, '0') + 'Z';
}

/** Runs `COPY target (columns) FROM STDIN (FORMAT binary)` with a finished body. */
export async function copyIn(client: pg.ClientBase, target: string, columns: string, body: Buffer): Promise<void> {
  const stream = client.query(copyFrom(`COPY ${target} (${columns}) FROM STDIN (FORMAT binary)`));
  const done = once(stream, 'finish');
  stream.end(body);
  await done;
}

/** Runs `COPY (query) TO STDOUT (FORMAT binary)` and returns the whole body. The query takes no parameters. */
export async function copyOut(client: pg.ClientBase, query: string): Promise<Buffer> {
  const stream = client.query(copyTo(`COPY (${query}) TO STDOUT (FORMAT binary)`));
  const chunks: Buffer[] = [];
  stream.on('data', (c: Buffer) => chunks.push(c));
  await once(stream, 'end');
  return Buffer.concat(chunks);
}
