/**
 * Rings read straight from the JSON bytes of a request, without JSON.parse: no object, no text
 * and no boxed number per reading. It covers the common form of a ring: an object whose keys
 * are ring fields written plainly, with numbers, null, true, false, text without escapes and
 * readings as a list of numbers and nulls, every value inside its bounds.
 *
 * The reader never decides a rejection. Whatever it does not take (any other form, any value
 * validateRing would refuse, readings in mV) goes the general way, JSON.parse and validateRing,
 * which give the exact reason. So a ring the reader takes is one the general way accepts, with
 * the same values to the bit: numbers are read as JSON.parse reads them (a mantissa of at most
 * 15 digits over an exact power of ten is correctly rounded, as JSON.parse's result is; any
 * other number is read by Number over its text), and the time is computed as parseRfc3339
 * computes it.
 *
 * readRingBatch reads a whole JSON batch body, { "rings": [ ... ] }, in one pass: it reads each
 * ring in the common form and checks the syntax of every other one, and keeps where each ring
 * starts and ends, so a ring the reader does not take can be parsed on its own.
 */
import { fahrenheitToCelsius } from '../core/temperature.ts';
import type { Range } from '../db/config.ts';
import type { RingRow } from '../db/rings.ts';
import type { ValidationContext } from './validate.ts';

const QUOTE = 0x22;
const BACKSLASH = 0x5c;
const COMMA = 0x2c;
const COLON = 0x3a;
const LBRACE = 0x7b;
const RBRACE = 0x7d;
const LBRACKET = 0x5b;
const RBRACKET = 0x5d;
const MINUS = 0x2d;
const PLUS = 0x2b;
const DOT = 0x2e;
const D0 = 0x30;
const D9 = 0x39;

const F_UNIT = 1 << 0;
const F_TS = 1 << 1;
const F_LOAD = 1 << 2;
const F_AMBIENT_C = 1 << 3;
const F_AMBIENT_KPA = 1 << 4;
const F_SPEED = 1 << 5;
const F_CDT = 1 << 6;
const F_CDP = 1 << 7;
const F_FUEL = 1 << 8;
const F_FLAME = 1 << 9;
const F_EXHAUST_C = 1 << 10;
const F_EXHAUST_F = 1 << 11;
const F_EXHAUST_MV = 1 << 12;
const F_COLD_JUNCTION = 1 << 13;
const REQUIRED = F_TS | F_LOAD | F_AMBIENT_C | F_AMBIENT_KPA | F_SPEED;

/** The ring fields by name (the keys validateRing knows), as bytes. */
const KEYS: { bytes: Buffer; bit: number }[] = (
  [
    ['unitId', F_UNIT], ['ts', F_TS], ['loadMw', F_LOAD], ['ambientC', F_AMBIENT_C], ['ambientKPa', F_AMBIENT_KPA],
    ['speedPct', F_SPEED], ['cdtC', F_CDT], ['cdpKPa', F_CDP], ['fuelFlowKgS', F_FUEL], ['flameDetected', F_FLAME],
    ['exhaustC', F_EXHAUST_C], ['exhaustF', F_EXHAUST_F], ['exhaustMv', F_EXHAUST_MV], ['coldJunctionC', F_COLD_JUNCTION],
  ] as const
).map(([name, bit]) => ({ bytes: Buffer.from(name, 'latin1'), bit }));

/** Exact powers of ten (every one up to 10^22 is a double). */
const POW10 = Array.from({ length: 23 }, (_, i) => Number(`1e${i}`));

const DAYS = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];

function inside(v: number, r: Range): boolean {
  return v >= r.min && v <= r.max;
}

const KEY_BYTES: Buffer[] = [];
for (const k of KEYS) KEY_BYTES[31 - Math.clz32(k.bit)] = k.bytes;

/** `bit` when b[s, s + length) holds the name of that field (lengths already equal), else 0. */
function same(b: Uint8Array, s: number, bit: number): number {
  const key = KEY_BYTES[31 - Math.clz32(bit)];
  for (let i = 0; i < key.length; i++) if (b[s + i] !== key[i]) return 0;
  return bit;
}

/** The field bit of the key in b[s, e), or 0 when it is not a ring field written plainly. */
function keyBit(b: Uint8Array, s: number, e: number): number {
  switch (e - s) {
    case 2:
      return b[s] === 0x74 && b[s + 1] === 0x73 ? F_TS : 0;
    case 4:
      return same(b, s, F_CDT);
    case 6:
      return b[s] === 0x75 ? same(b, s, F_UNIT) : b[s] === 0x6c ? same(b, s, F_LOAD) : same(b, s, F_CDP);
    case 8:
      if (b[s] === 0x65) return b[s + 7] === 0x43 ? same(b, s, F_EXHAUST_C) : same(b, s, F_EXHAUST_F);
      return b[s] === 0x61 ? same(b, s, F_AMBIENT_C) : same(b, s, F_SPEED);
    case 9:
      return same(b, s, F_EXHAUST_MV);
    case 10:
      return same(b, s, F_AMBIENT_KPA);
    case 11:
      return same(b, s, F_FUEL);
    case 13:
      return b[s] === 0x66 ? same(b, s, F_FLAME) : same(b, s, F_COLD_JUNCTION);
    default:
      return 0;
  }
}

function isSpace(c: number): boolean {
  return c === 0x20 || c === 0x0a || c === 0x0d || c === 0x09;
}

function skipSpace(b: Uint8Array, p: number, end: number): number {
  while (p < end && isSpace(b[p])) p++;
  return p;
}

/**
 * After a member's value in an object: past the `,` and the space after it (the next member's
 * key), or past the closing `}`; -1 for anything else. The caller tells the two by b[p - 1].
 */
function afterMember(b: Uint8Array, p: number, end: number): number {
  p = skipSpace(b, p, end);
  if (p >= end) return -1;
  if (b[p] === RBRACE) return p + 1;
  if (b[p] !== COMMA) return -1;
  return skipSpace(b, p + 1, end);
}

/** End of the literal `word` at p, or -1. */
function literal(b: Uint8Array, p: number, end: number, word: string): number {
  if (p + word.length > end) return -1;
  for (let i = 0; i < word.length; i++) if (b[p + i] !== word.charCodeAt(i)) return -1;
  return p + word.length;
}

/** End of a JSON number starting at p (strict grammar), or -1. */
function numberEnd(b: Uint8Array, p: number, end: number): number {
  if (p < end && b[p] === MINUS) p++;
  if (p >= end) return -1;
  let c = b[p];
  if (c === D0) p++;
  else if (c > D0 && c <= D9) {
    p++;
    while (p < end && b[p] >= D0 && b[p] <= D9) p++;
  } else return -1;
  if (p < end && b[p] === DOT) {
    p++;
    if (p >= end || b[p] < D0 || b[p] > D9) return -1;
    while (p < end && b[p] >= D0 && b[p] <= D9) p++;
  }
  if (p < end && (b[p] === 0x65 || b[p] === 0x45)) {
    p++;
    if (p < end && (b[p] === PLUS || b[p] === MINUS)) p++;
    if (p >= end || b[p] < D0 || b[p] > D9) return -1;
    while (p < end && b[p] >= D0 && b[p] <= D9) p++;
  }
  return p;
}

/** End of a JSON string starting at its opening quote p (escapes checked), or -1. */
function stringEnd(b: Uint8Array, p: number, end: number): number {
  p++;
  while (p < end) {
    const c = b[p];
    if (c === QUOTE) return p + 1;
    if (c < 0x20) return -1;
    if (c === BACKSLASH) {
      if (p + 1 >= end) return -1;
      const e = b[p + 1];
      if (e === 0x75) {
        if (p + 6 > end) return -1;
        for (let i = 2; i < 6; i++) {
          const h = b[p + i];
          if (!((h >= D0 && h <= D9) || (h >= 0x41 && h <= 0x46) || (h >= 0x61 && h <= 0x66))) return -1;
        }
        p += 6;
        continue;
      }
      if (e !== QUOTE && e !== BACKSLASH && e !== 0x2f && e !== 0x62 && e !== 0x66 && e !== 0x6e && e !== 0x72 && e !== 0x74) return -1;
      p += 2;
      continue;
    }
    p++;
  }
  return -1;
}

/** End of a scalar JSON value (text, number, true, false, null) at p, or -1. */
function scalarEnd(b: Uint8Array, p: number, end: number): number {
  const c = b[p];
  if (c === QUOTE) return stringEnd(b, p, end);
  if (c === 0x74) return literal(b, p, end, 'true');
  if (c === 0x66) return literal(b, p, end, 'false');
  if (c === 0x6e) return literal(b, p, end, 'null');
  return numberEnd(b, p, end);
}

/**
 * The end (after the closing brace) of the JSON object at b[p] whose keys are ring fields
 * written plainly and whose values are scalars or lists of scalars, every token checked as
 * JSON.parse would; -1 for anything else.
 */
function objectEnd(b: Uint8Array, p: number, end: number): number {
  if (p >= end || b[p] !== LBRACE) return -1;
  p = skipSpace(b, p + 1, end);
  if (p < end && b[p] === RBRACE) return p + 1;
  for (;;) {
    if (p >= end || b[p] !== QUOTE) return -1;
    const k = stringEnd(b, p, end);
    if (k < 0 || keyBit(b, p + 1, k - 1) === 0) return -1;
    p = skipSpace(b, k, end);
    if (p >= end || b[p] !== COLON) return -1;
    p = skipSpace(b, p + 1, end);
    if (p >= end) return -1;
    if (b[p] === LBRACKET) {
      p = skipSpace(b, p + 1, end);
      if (p < end && b[p] === RBRACKET) p++;
      else {
        for (;;) {
          if (p >= end) return -1;
          p = scalarEnd(b, p, end);
          if (p < 0) return -1;
          p = skipSpace(b, p, end);
          if (p >= end) return -1;
          if (b[p] === RBRACKET) {
            p++;
            break;
          }
          if (b[p] !== COMMA) return -1;
          p = skipSpace(b, p + 1, end);
        }
      }
    } else {
      p = scalarEnd(b, p, end);
      if (p < 0) return -1;
    }
    p = afterMember(b, p, end);
    if (p < 0 || b[p - 1] === RBRACE) return p;
  }
}

/**
 * A JSON batch body found to be exactly { "rings": [ {…}, … ] }: the body, each ring's span,
 * and the reader holding the values of every ring in the common form (fast[i] = 1). release()
 * hands the reader, with the storage it has grown, to the next batch.
 */
export class RingBatchBytes {
  private released = false;
  constructor(
    readonly body: Buffer,
    readonly starts: Int32Array,
    readonly ends: Int32Array,
    readonly fast: Uint8Array,
    readonly reader: RingBytesReader,
  ) {}
  get length(): number {
    return this.starts.length;
  }
  /** Ends the use of this batch's spans and values. */
  release(): void {
    if (this.released) return;
    this.released = true;
    giveBack(this.reader);
  }
}

/** Readers with their storage, kept between batches (a few; more are made when needed). */
const spareReaders: RingBytesReader[] = [];
const MAX_SPARE_READERS = 8;

function giveBack(reader: RingBytesReader): void {
  if (spareReaders.length < MAX_SPARE_READERS) spareReaders.push(reader);
}

const RINGS_KEY = Buffer.from('"rings"', 'latin1');

/**
 * Reads a JSON batch body in one pass: it must be an object with the one key "rings" holding a
 * list of objects whose keys are ring fields written plainly and whose values are scalars or
 * lists of scalars (every token checked as JSON.parse would). A ring in the common form is read
 * as it is passed (its values kept in the reader); another is only checked. Null for any other
 * body, which then goes to the general JSON parser for its answer.
 */
export function readRingBatch(body: Buffer): RingBatchBytes | null {
  const b = body;
  const end = b.length;
  let p = skipSpace(b, 0, end);
  if (p >= end || b[p] !== LBRACE) return null;
  p = skipSpace(b, p + 1, end);
  if (p + RINGS_KEY.length > end) return null;
  for (let i = 0; i < RINGS_KEY.length; i++) if (b[p + i] !== RINGS_KEY[i]) return null;
  p = skipSpace(b, p + RINGS_KEY.length, end);
  if (p >= end || b[p] !== COLON) return null;
  p = skipSpace(b, p + 1, end);
  if (p >= end || b[p] !== LBRACKET) return null;
  p = skipSpace(b, p + 1, end);
  const reader = spareReaders.pop() ?? new RingBytesReader();
  reader.startBatch();
  let n = 0;
  let closed = false;
  if (p < end && b[p] === RBRACKET) {
    p++;
    closed = true;
  } else {
    for (;;) {
      reader.spanRoom(n);
      let q = reader.readAt(b, p, end);
      if (q >= 0) {
        reader.save(n);
        reader.spanFast[n] = 1;
      } else {
        q = objectEnd(b, p, end);
        if (q < 0) break;
        reader.spanFast[n] = 0;
      }
      reader.spanStarts[n] = p;
      reader.spanEnds[n] = q;
      n++;
      p = skipSpace(b, q, end);
      if (p >= end) break;
      if (b[p] === RBRACKET) {
        p++;
        closed = true;
        break;
      }
      if (b[p] !== COMMA) break;
      p = skipSpace(b, p + 1, end);
    }
  }
  if (closed) {
    p = skipSpace(b, p, end);
    if (p < end && b[p] === RBRACE && skipSpace(b, p + 1, end) === end) {
      return new RingBatchBytes(body, reader.spanStarts.subarray(0, n), reader.spanEnds.subarray(0, n), reader.spanFast.subarray(0, n), reader);
    }
  }
  giveBack(reader);
  return null;
}

/**
 * Reads rings in the common form from bytes. read() takes one JSON object and keeps its values;
 * unitId() names the unit it gave, if any; check() judges the values for a unit as
 * validateRing would and fills `row`. One reader per request; `row` and its readings are reused
 * by the next ring.
 */
export class RingBytesReader {
  readonly row: RingRow = {
    unitId: '', tsMs: 0, loadMw: 0, ambientC: 0, ambientKPa: 0, speedPct: 0,
    cdtC: null, cdpKPa: null, fuelFlowKgS: null, flameDetected: null, exhaustC: new Float64Array(0),
  };
  private b: Buffer = Buffer.alloc(0);
  private seen = 0;
  private num = 0;
  private unitStart = 0;
  private unitEnd = 0;
  private tsStart = 0;
  private tsEnd = 0;
  private loadMw = 0;
  private ambientC = 0;
  private ambientKPa = 0;
  private speedPct = 0;
  private cdtC: number | null = null;
  private cdpKPa: number | null = null;
  private fuelFlowKgS: number | null = null;
  private flame: boolean | null = null;
  private readings = new Float64Array(64);
  private readingCount = 0;
  /** Views of `readings` by length, so a row's exhaustC has the ring's own length. */
  private views: Float64Array[] = [];
  /** Rings of a batch kept by save(): seven integers and eight numbers per ring, and the readings. */
  private savedInts = new Int32Array(7 * 64);
  private savedNums = new Float64Array(8 * 64);
  private savedReadings = new Float64Array(64 * 24);
  private savedTop = 0;
  /** Where each ring of a batch starts and ends, and whether it was read (1) or only checked (0). */
  spanStarts = new Int32Array(64);
  spanEnds = new Int32Array(64);
  spanFast = new Uint8Array(64);
  private lastUnitBytes: Uint8Array = new Uint8Array(0);
  private lastUnit = '';
  private dayKey = -1;
  private dayMs = 0;

  /** A JSON number at p into this.num; its end, or -1. */
  private number(p: number, end: number): number {
    const b = this.b;
    const start = p;
    let neg = false;
    if (p < end && b[p] === MINUS) {
      neg = true;
      p++;
    }
    if (p >= end) return -1;
    let d = b[p] - D0;
    let m = 0;
    let digits = 0;
    if (d === 0) p++;
    else if (d > 0 && d <= 9) {
      do {
        m = m * 10 + d;
        digits++;
        if (++p === end) break;
        d = b[p] - D0;
      } while (d >= 0 && d <= 9);
    } else return -1;
    let frac = 0;
    if (p < end && b[p] === DOT) {
      const f0 = ++p;
      while (p < end) {
        d = b[p] - D0;
        if (d < 0 || d > 9) break;
        m = m * 10 + d;
        p++;
      }
      frac = p - f0;
      if (frac === 0) return -1;
      digits += frac;
    }
    if (p < end && (b[p] | 0x20) === 0x65) {
      p = numberEnd(b, start, end);
      if (p < 0) return -1;
      this.num = Number(b.toString('latin1', start, p));
      return p;
    }
    if (digits <= 15) this.num = (neg ? -m : m) / POW10[frac];
    else this.num = Number(b.toString('latin1', start, p));
    return p;
  }

  /** Plain text (no escapes, ASCII) at the quote p; its end after the closing quote, or -1. */
  private plainText(p: number, end: number): number {
    const b = this.b;
    p++;
    while (p < end) {
      const c = b[p];
      if (c === QUOTE) return p + 1;
      if (c < 0x20 || c >= 0x7f || c === BACKSLASH) return -1;
      p++;
    }
    return -1;
  }

  /** A list of numbers and nulls at the bracket p into readings; its end, or -1. */
  private list(p: number, end: number): number {
    const b = this.b;
    p = skipSpace(b, p + 1, end);
    let n = 0;
    if (p < end && b[p] === RBRACKET) {
      this.readingCount = 0;
      return p + 1;
    }
    let out = this.readings;
    for (;;) {
      if (p >= end) return -1;
      if (n === out.length) {
        const more = new Float64Array(n * 2);
        more.set(out);
        this.readings = out = more;
        this.views = [];
      }
      if (b[p] === 0x6e) {
        p = literal(b, p, end, 'null');
        if (p < 0) return -1;
        out[n++] = NaN;
      } else {
        p = this.number(p, end);
        if (p < 0) return -1;
        out[n++] = this.num;
      }
      if (p >= end) return -1;
      let c = b[p];
      if (c === COMMA) {
        c = b[++p];
        if (c === 0x20 || c === 0x0a || c === 0x0d || c === 0x09) p = skipSpace(b, p, end);
        continue;
      }
      if (c === RBRACKET) break;
      p = skipSpace(b, p, end);
      if (p >= end) return -1;
      if (b[p] === RBRACKET) break;
      if (b[p] !== COMMA) return -1;
      p = skipSpace(b, p + 1, end);
    }
    this.readingCount = n;
    return p + 1;
  }

  /** A number, or null when `nullable`; its end, or -1. The value is in this.num, NaN for null. */
  private value(p: number, end: number, nullable: boolean): number {
    if (this.b[p] === 0x6e) {
      if (!nullable) return -1;
      this.num = NaN;
      return literal(this.b, p, end, 'null');
    }
    return this.number(p, end);
  }

  /**
   * Reads the JSON object in b[start, end) (surrounding white space allowed): true when it is a
   * ring in the common form. Its values are checked by check().
   */
  read(b: Buffer, start: number, end: number): boolean {
    const q = this.readAt(b, skipSpace(b, start, end), end);
    return q >= 0 && skipSpace(b, q, end) === end;
  }

  /**
   * Reads the JSON object that starts at b[p] (before `end`): the index after its closing brace
   * when it is a ring in the common form, else -1.
   */
  readAt(b: Buffer, p: number, end: number): number {
    this.b = b;
    this.seen = 0;
    this.cdtC = null;
    this.cdpKPa = null;
    this.fuelFlowKgS = null;
    this.flame = null;
    if (p >= end || b[p] !== LBRACE) return -1;
    p = skipSpace(b, p + 1, end);
    for (;;) {
      if (p >= end || b[p] !== QUOTE) return -1;
      const ks = p + 1;
      let q = ks;
      while (q < end && b[q] !== QUOTE) q++;
      if (q >= end) return -1;
      const bit = keyBit(b, ks, q);
      if (bit === 0 || (this.seen & bit) !== 0) return -1;
      this.seen |= bit;
      p = skipSpace(b, q + 1, end);
      if (p >= end || b[p] !== COLON) return -1;
      p = skipSpace(b, p + 1, end);
      if (p >= end) return -1;
      switch (bit) {
        case F_UNIT: {
          if (b[p] !== QUOTE) return -1;
          const s = p + 1;
          p++;
          while (p < end && ((b[p] >= 0x61 && b[p] <= 0x7a) || (b[p] >= D0 && b[p] <= D9) || b[p] === MINUS)) p++;
          if (p >= end || b[p] !== QUOTE || p === s || p - s > 40) return -1;
          this.unitStart = s;
          this.unitEnd = p;
          p++;
          break;
        }
        case F_TS:
          if (b[p] !== QUOTE) return -1;
          this.tsStart = p + 1;
          p = this.plainText(p, end);
          this.tsEnd = p - 1;
          break;
        case F_LOAD:
          p = this.value(p, end, false);
          this.loadMw = this.num;
          break;
        case F_AMBIENT_C:
          p = this.value(p, end, false);
          this.ambientC = this.num;
          break;
        case F_AMBIENT_KPA:
          p = this.value(p, end, false);
          this.ambientKPa = this.num;
          break;
        case F_SPEED:
          p = this.value(p, end, false);
          this.speedPct = this.num;
          break;
        case F_CDT:
          p = this.value(p, end, true);
          this.cdtC = this.num === this.num ? this.num : null;
          break;
        case F_CDP:
          p = this.value(p, end, true);
          this.cdpKPa = this.num === this.num ? this.num : null;
          break;
        case F_FUEL:
          p = this.value(p, end, true);
          this.fuelFlowKgS = this.num === this.num ? this.num : null;
          break;
        case F_FLAME:
          if (b[p] === 0x74) {
            p = literal(b, p, end, 'true');
            this.flame = true;
          } else if (b[p] === 0x66) {
            p = literal(b, p, end, 'false');
            this.flame = false;
          } else p = literal(b, p, end, 'null');
          break;
        case F_EXHAUST_C:
        case F_EXHAUST_F:
          if (b[p] !== LBRACKET) return -1;
          p = this.list(p, end);
          break;
        default:
          return -1;
      }
      if (p < 0) return -1;
      p = afterMember(b, p, end);
      if (p < 0 || b[p - 1] === RBRACE) return p;
    }
  }

  /** Starts keeping the rings of a new batch (storage grown for earlier ones is reused). */
  startBatch(): void {
    this.savedTop = 0;
  }

  /** Makes room for ring `slot` of a batch in the span arrays. */
  spanRoom(slot: number): void {
    if (slot < this.spanStarts.length) return;
    const size = this.spanStarts.length * 2;
    const starts = new Int32Array(size);
    starts.set(this.spanStarts);
    this.spanStarts = starts;
    const ends = new Int32Array(size);
    ends.set(this.spanEnds);
    this.spanEnds = ends;
    const fast = new Uint8Array(size);
    fast.set(this.spanFast);
    this.spanFast = fast;
  }

  /** Keeps the values of the ring just read as ring `slot` of a batch (slots in increasing order). */
  save(slot: number): void {
    while ((slot + 1) * 7 > this.savedInts.length) {
      const ints = new Int32Array(this.savedInts.length * 2);
      ints.set(this.savedInts);
      this.savedInts = ints;
      const nums = new Float64Array(this.savedNums.length * 2);
      nums.set(this.savedNums);
      this.savedNums = nums;
    }
    const n = this.readingCount;
    if (this.savedTop + n > this.savedReadings.length) {
      const more = new Float64Array(Math.max(this.savedReadings.length * 2, this.savedTop + n));
      more.set(this.savedReadings.subarray(0, this.savedTop));
      this.savedReadings = more;
    }
    const i = slot * 7;
    const ints = this.savedInts;
    ints[i] = this.seen;
    ints[i + 1] = this.tsStart;
    ints[i + 2] = this.tsEnd;
    ints[i + 3] = this.unitStart;
    ints[i + 4] = this.unitEnd;
    ints[i + 5] = this.savedTop;
    ints[i + 6] = n;
    const f = slot * 8;
    const nums = this.savedNums;
    nums[f] = this.loadMw;
    nums[f + 1] = this.ambientC;
    nums[f + 2] = this.ambientKPa;
    nums[f + 3] = this.speedPct;
    nums[f + 4] = this.cdtC ?? NaN;
    nums[f + 5] = this.cdpKPa ?? NaN;
    nums[f + 6] = this.fuelFlowKgS ?? NaN;
    nums[f + 7] = this.flame === null ? -1 : this.flame ? 1 : 0;
    this.savedReadings.set(this.readings.subarray(0, n), this.savedTop);
    this.savedTop += n;
  }

  /** Makes ring `slot` of the batch in `b` the ring read, as save() kept it. */
  load(b: Buffer, slot: number): void {
    this.b = b;
    const i = slot * 7;
    const ints = this.savedInts;
    this.seen = ints[i];
    this.tsStart = ints[i + 1];
    this.tsEnd = ints[i + 2];
    this.unitStart = ints[i + 3];
    this.unitEnd = ints[i + 4];
    const from = ints[i + 5];
    const n = ints[i + 6];
    const f = slot * 8;
    const nums = this.savedNums;
    this.loadMw = nums[f];
    this.ambientC = nums[f + 1];
    this.ambientKPa = nums[f + 2];
    this.speedPct = nums[f + 3];
    this.cdtC = nums[f + 4] === nums[f + 4] ? nums[f + 4] : null;
    this.cdpKPa = nums[f + 5] === nums[f + 5] ? nums[f + 5] : null;
    this.fuelFlowKgS = nums[f + 6] === nums[f + 6] ? nums[f + 6] : null;
    this.flame = nums[f + 7] < 0 ? null : nums[f + 7] === 1;
    if (n > this.readings.length) {
      this.readings = new Float64Array(n);
      this.views = [];
    }
    this.readings.set(this.savedReadings.subarray(from, from + n));
    this.readingCount = n;
  }

  /** Whether the ring read names a unit. */
  get namesUnit(): boolean {
    return (this.seen & F_UNIT) !== 0;
  }

  /** The unit the ring read names (lower-case letters, digits and dashes), or null. */
  unitId(): string | null {
    if ((this.seen & F_UNIT) === 0) return null;
    const b = this.b;
    const s = this.unitStart;
    const n = this.unitEnd - s;
    const last = this.lastUnitBytes;
    let same = last.length === n;
    for (let i = 0; same && i < n; i++) same = b[s + i] === last[i];
    if (!same) {
      this.lastUnitBytes = Uint8Array.prototype.slice.call(b, s, this.unitEnd);
      this.lastUnit = b.toString('latin1', s, this.unitEnd);
    }
    return this.lastUnit;
  }

  private digits(p: number, n: number): number {
    const b = this.b;
    let v = 0;
    for (let i = 0; i < n; i++) {
      const c = b[p + i];
      if (c < D0 || c > D9) return -1;
      v = v * 10 + (c - D0);
    }
    return v;
  }

  /** The ring's time in ms since 1970 as parseRfc3339 gives it, or NaN when it is not one. */
  private time(): number {
    const b = this.b;
    const p = this.tsStart;
    const e = this.tsEnd;
    if (e - p < 20) return NaN;
    const y = this.digits(p, 4);
    const mo = this.digits(p + 5, 2);
    const d = this.digits(p + 8, 2);
    const h = this.digits(p + 11, 2);
    const mi = this.digits(p + 14, 2);
    const s = this.digits(p + 17, 2);
    const t = b[p + 10];
    if (y < 100 || mo < 1 || d < 0 || h < 0 || mi < 0 || s < 0) return NaN;
    if (b[p + 4] !== MINUS || b[p + 7] !== MINUS || b[p + 13] !== COLON || b[p + 16] !== COLON) return NaN;
    if (t !== 0x54 && t !== 0x74 && t !== 0x20) return NaN;
    if (mo > 12 || h > 23 || mi > 59 || s > 59) return NaN;
    const leap = (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;
    if (d < 1 || d > (mo === 2 && leap ? 29 : DAYS[mo - 1])) return NaN;
    let q = p + 19;
    let fracMs = 0;
    if (b[q] === DOT) {
      q++;
      const f0 = q;
      let f = 0;
      while (q < e && b[q] >= D0 && b[q] <= D9) f = f * 10 + (b[q++] - D0);
      const nd = q - f0;
      if (nd < 1 || nd > 9) return NaN;
      fracMs = Math.floor((f / POW10[nd]) * 1000);
    }
    let off = 0;
    const z = b[q];
    if (z === 0x5a || z === 0x7a) {
      if (q + 1 !== e) return NaN;
    } else if (z === PLUS || z === MINUS) {
      if (q + 6 !== e || b[q + 3] !== COLON) return NaN;
      const oh = this.digits(q + 1, 2);
      const om = this.digits(q + 4, 2);
      if (oh < 0 || om < 0 || oh > 23 || om > 59) return NaN;
      off = (oh * 60 + om) * 60_000;
      if (z === PLUS) off = -off;
    } else return NaN;
    const key = (y * 100 + mo) * 100 + d;
    if (key !== this.dayKey) {
      this.dayKey = key;
      this.dayMs = Date.UTC(y, mo - 1, d);
    }
    return this.dayMs + ((h * 60 + mi) * 60 + s) * 1000 + fracMs + off;
  }

  /**
   * Judges the ring read for `unitId` as validateRing does: true when validateRing would accept
   * it, with `row` holding the ring it would return; false when the general way must judge it.
   */
  check(unitId: string, ctx: ValidationContext): boolean {
    const seen = this.seen;
    if ((seen & REQUIRED) !== REQUIRED) return false;
    const fahrenheit = (seen & F_EXHAUST_F) !== 0;
    if (fahrenheit === ((seen & F_EXHAUST_C) !== 0)) return false;
    const tsMs = this.time();
    if (!(tsMs >= 0) || (tsMs - ctx.nowMs) / 1000 > ctx.futureToleranceS) return false;
    const bounds = ctx.bounds;
    if (!inside(this.loadMw, bounds.loadMw) || !inside(this.ambientC, bounds.ambientC)) return false;
    if (!inside(this.ambientKPa, bounds.ambientKPa) || !inside(this.speedPct, bounds.speedPct)) return false;
    if (this.cdtC !== null && !inside(this.cdtC, bounds.cdtC)) return false;
    if (this.cdpKPa !== null && !inside(this.cdpKPa, bounds.cdpKPa)) return false;
    if (this.fuelFlowKgS !== null && !inside(this.fuelFlowKgS, bounds.fuelFlowKgS)) return false;
    const n = this.readingCount;
    if (ctx.thermocoupleCount(tsMs) !== n) return false;
    const lo = bounds.exhaustC.min;
    const hi = bounds.exhaustC.max;
    const r = this.readings;
    for (let i = 0; i < n; i++) {
      let v = r[i];
      if (v !== v) continue;
      if (v === Infinity || v === -Infinity) return false;
      if (fahrenheit) r[i] = v = fahrenheitToCelsius(v);
      if (!(v >= lo && v <= hi)) return false;
    }
    let view = this.views[n];
    if (view === undefined) view = this.views[n] = r.subarray(0, n);
    const row = this.row;
    row.unitId = unitId;
    row.tsMs = tsMs;
    row.loadMw = this.loadMw;
    row.ambientC = this.ambientC;
    row.ambientKPa = this.ambientKPa;
    row.speedPct = this.speedPct;
    row.cdtC = this.cdtC;
    row.cdpKPa = this.cdpKPa;
    row.fuelFlowKgS = this.fuelFlowKgS;
    row.flameDetected = this.flame;
    row.exhaustC = view;
    return true;
  }
}
