/**
 * Rings repository: every query about the ring table. Writing goes through PostgreSQL's binary
 * COPY (no text formatting or parsing of readings on either side); reading returns readings as
 * Float64Array in time order. Validation is not done here: rows arrive already checked.
 */
import { once } from 'node:events';
import pg from 'pg';
import { from as copyFrom } from 'pg-copy-streams';

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
}

export const RING_COLUMNS = 'unit_id, ts, load_mw, ambient_c, ambient_kpa, speed_pct, cdt_c, cdp_kpa, fuel_flow_kg_s, flame_detected, exhaust_c';
const FIELD_COUNT = 11;
const FLOAT4_OID = 700;
/** Microseconds between 1970-01-01 and PostgreSQL's epoch 2000-01-01 (UTC), in ms. */
const PG_EPOCH_MS = 946_684_800_000;
const SIGNATURE = Buffer.from('PGCOPY\n\xff\r\n\0', 'latin1');
const TWO_32 = 4_294_967_296;

/**
 * Builds the body of a binary COPY of ring rows (header, tuples, trailer) into one growing
 * buffer. One encoder per chunk; reset() reuses the buffer for the next chunk.
 */
export class RingCopyEncoder {
  private buf: Buffer;
  private pos = 0;
  count = 0;

  constructor(initialBytes = 1 << 20) {
    this.buf = Buffer.allocUnsafe(initialBytes);
    this.reset();
  }

  reset(): void {
    this.pos = 0;
    this.count = 0;
    SIGNATURE.copy(this.buf, 0);
    this.buf.writeInt32BE(0, 11); // flags
    this.buf.writeInt32BE(0, 15); // header extension length
    this.pos = 19;
  }

  get bytes(): number {
    return this.pos;
  }

  private room(n: number): void {
    if (this.pos + n <= this.buf.length) return;
    let size = this.buf.length * 2;
    while (size < this.pos + n) size *= 2;
    const next = Buffer.allocUnsafe(size);
    this.buf.copy(next, 0, 0, this.pos);
    this.buf = next;
  }

  private float4(v: number): void {
    this.buf.writeInt32BE(4, this.pos);
    this.buf.writeFloatBE(v, this.pos + 4);
    this.pos += 8;
  }

  private nullable4(v: number | null): void {
    if (v === null) {
      this.buf.writeInt32BE(-1, this.pos);
      this.pos += 4;
    } else this.float4(v);
  }

  add(r: RingRow): void {
    const n = r.exhaustC.length;
    const idBytes = Buffer.byteLength(r.unitId, 'utf8');
    this.room(2 + 4 + idBytes + 12 + 8 * 7 + 5 + 4 + 20 + 8 * n);
    const b = this.buf;
    b.writeInt16BE(FIELD_COUNT, this.pos);
    b.writeInt32BE(idBytes, this.pos + 2);
    this.pos += 6;
    this.pos += b.write(r.unitId, this.pos, 'utf8');
    // timestamptz: int64 microseconds since 2000-01-01 UTC, written as two 32-bit halves.
    const us = (r.tsMs - PG_EPOCH_MS) * 1000;
    const hi = Math.floor(us / TWO_32);
    b.writeInt32BE(8, this.pos);
    b.writeInt32BE(hi, this.pos + 4);
    b.writeUInt32BE(us - hi * TWO_32, this.pos + 8);
    this.pos += 12;
    this.float4(r.loadMw);
    this.float4(r.ambientC);
    this.float4(r.ambientKPa);
    this.float4(r.speedPct);
    this.nullable4(r.cdtC);
    this.nullable4(r.cdpKPa);
    this.nullable4(r.fuelFlowKgS);
    if (r.flameDetected === null) {
      b.writeInt32BE(-1, this.pos);
      this.pos += 4;
    } else {
      b.writeInt32BE(1, this.pos);
      b[this.pos + 4] = r.flameDetected ? 1 : 0;
      this.pos += 5;
    }
    // real[]: ndim, has-null flag, element type, then (size, lower bound) and the elements.
    const lenAt = this.pos;
    this.pos += 4;
    const start = this.pos;
    let hasNull = 0;
    b.writeInt32BE(1, this.pos);
    const nullFlagAt = this.pos + 4;
    b.writeInt32BE(FLOAT4_OID, this.pos + 8);
    b.writeInt32BE(n, this.pos + 12);
    b.writeInt32BE(1, this.pos + 16);
    this.pos += 20;
    const ex = r.exhaustC;
    for (let i = 0; i < n; i++) {
      const v = ex[i];
      if (v === v && v !== null && v !== undefined) {
        b.writeInt32BE(4, this.pos);
        b.writeFloatBE(v, this.pos + 4);
        this.pos += 8;
      } else {
        b.writeInt32BE(-1, this.pos);
        this.pos += 4;
        hasNull = 1;
      }
    }
    b.writeInt32BE(hasNull, nullFlagAt);
    b.writeInt32BE(this.pos - start, lenAt);
    this.count++;
  }

  /** The finished COPY body (a view of the internal buffer, valid until the next reset or add). */
  finish(): Buffer {
    this.room(2);
    this.buf.writeInt16BE(-1, this.pos);
    return this.buf.subarray(0, this.pos + 2);
  }
}

/** Sends one binary COPY body to `COPY target (columns) FROM STDIN`. */
export async function copyBinary(client: pg.ClientBase, target: string, body: Buffer): Promise<void> {
  const stream = client.query(copyFrom(`COPY ${target} (${RING_COLUMNS}) FROM STDIN (FORMAT binary)`));
  const done = once(stream, 'finish');
  stream.end(body);
  await done;
}
