/**
 * Reading rings from a byte stream without holding the whole body: NDJSON (one ring per line,
 * each naming its unit) and CSV (a header row, then one ring per row, for one unit). Lines are
 * cut from the bytes as they arrive; a line longer than the limit stops the whole request.
 * Each ring goes through validateRing and into an IngestRun, which writes in chunks; nothing
 * here touches the database directly.
 */
import { badRequest, tooLarge, unprocessable } from '../http/errors.ts';
import type { IngestBounds } from '../db/config.ts';
import { RingBytesReader } from './ring-bytes.ts';
import { IngestRun } from './run.ts';
import { isRejection, thermocoupleCounter, validateRing, type ValidationContext } from './validate.ts';

const UNIT_ID_RE = /^[a-z0-9-]{1,40}$/;
const NEWLINE = 0x0a;

/** The lines completed by one chunk, as byte spans (CR and a leading BOM already cut off). */
export interface LineSpans {
  /** The line begun in an earlier chunk and ended in this one, or null. */
  joined: Buffer | null;
  /** Lines wholly inside the chunk: line i is chunk[starts[i], ends[i]). */
  starts: number[];
  ends: number[];
  /** joined (if any) plus the lines inside the chunk. */
  count: number;
}

/**
 * Cuts a byte stream into lines (LF or CRLF). A line is handed out whole, as a byte span or as
 * UTF-8 text decoded from its complete bytes, so a character split between two chunks is never
 * broken. Refuses a line longer than `limit` bytes.
 */
export class LineSplitter {
  private carry: Buffer | null = null;
  private first = true;
  private readonly spansOut: LineSpans = { joined: null, starts: [], ends: [], count: 0 };
  /** Number of the last line handed out, from 1. */
  lineNo = 0;

  constructor(private readonly limit: number) {}

  private tooLong(): never {
    throw tooLarge(`Line ${this.lineNo + 1} is longer than ${this.limit} bytes, the most one line may hold (CANSIGHT_LINE_LIMIT_BYTES); nothing was stored. Put one ring on each line, ended by a newline.`);
  }

  /** Records the line buf[start, end) without its CR, and without a BOM on the first line. */
  private span(buf: Buffer, start: number, end: number): void {
    if (end > start && buf[end - 1] === 0x0d) end--;
    if (this.first) {
      this.first = false;
      if (end - start >= 3 && buf[start] === 0xef && buf[start + 1] === 0xbb && buf[start + 2] === 0xbf) start += 3;
    }
    this.lineNo++;
    this.spansOut.starts.push(start);
    this.spansOut.ends.push(end);
  }

  /**
   * The lines this chunk completes, as spans (the object is reused by the next call). A line
   * begun earlier is copied together into `joined`; the others are views of the chunk.
   */
  spans(chunk: Buffer): LineSpans {
    const out = this.spansOut;
    out.joined = null;
    out.starts.length = 0;
    out.ends.length = 0;
    out.count = 0;
    let start = 0;
    let nl = chunk.indexOf(NEWLINE, 0);
    if (this.carry !== null) {
      if (nl === -1) {
        if (this.carry.length + chunk.length > this.limit) this.tooLong();
        this.carry = Buffer.concat([this.carry, chunk]);
        return out;
      }
      if (this.carry.length + nl > this.limit) this.tooLong();
      const joined = Buffer.concat([this.carry, chunk.subarray(0, nl)]);
      this.carry = null;
      this.span(joined, 0, joined.length);
      out.joined = joined.subarray(out.starts[0], out.ends[0]);
      out.starts.length = 0;
      out.ends.length = 0;
      start = nl + 1;
      nl = chunk.indexOf(NEWLINE, start);
    }
    while (nl !== -1) {
      if (nl - start > this.limit) this.tooLong();
      this.span(chunk, start, nl);
      start = nl + 1;
      nl = chunk.indexOf(NEWLINE, start);
    }
    if (start < chunk.length) {
      if (chunk.length - start > this.limit) this.tooLong();
      this.carry = Buffer.from(chunk.subarray(start));
    }
    out.count = out.starts.length + (out.joined === null ? 0 : 1);
    return out;
  }

  /** The complete lines in this chunk (with any carried part of the previous one), as text. */
  push(chunk: Buffer): string[] {
    const sp = this.spans(chunk);
    const lines: string[] = [];
    if (sp.joined !== null) lines.push(sp.joined.toString('utf8'));
    for (let i = 0; i < sp.starts.length; i++) lines.push(chunk.toString('utf8', sp.starts[i], sp.ends[i]));
    return lines;
  }

  /** The last line when the stream does not end with a newline, as a span, or null. */
  endSpan(): Buffer | null {
    if (this.carry === null) return null;
    const c = this.carry;
    this.carry = null;
    const out = this.spansOut;
    out.starts.length = 0;
    out.ends.length = 0;
    this.span(c, 0, c.length);
    return c.subarray(out.starts[0], out.ends[0]);
  }

  /** The last line when the stream does not end with a newline. */
  end(): string[] {
    const last = this.endSpan();
    return last === null ? [] : [last.toString('utf8')];
  }
}

export interface StreamIngestOptions {
  run: IngestRun;
  nowMs: number;
  futureToleranceS: number;
  bounds: IngestBounds;
  lineLimitBytes: number;
  /** Unit for lines that do not name one (NDJSON), or the unit of every row (CSV). */
  defaultUnitId?: string;
  /** Unit for every line, whatever the line says (the import command's --unit). */
  overrideUnitId?: string;
  /** False for a unit outside the caller's scope: that line is rejected. */
  mayWrite?: (unitId: string) => boolean;
  /** Bytes read so far, after each chunk (progress display). */
  onBytes?: (bytes: number) => void;
}

export interface StreamSummary {
  /** Lines read (NDJSON) or data rows read (CSV). */
  records: number;
}

type Counter = (tsMs: number) => number | undefined;

/** Per-run cache of each unit's thermocouple count lookup; null for an unknown unit. */
class UnitCache {
  private readonly units = new Map<string, Counter | null>();
  constructor(private readonly run: IngestRun) {}
  get(unitId: string): Counter | null | undefined {
    return this.units.get(unitId);
  }
  async load(unitId: string): Promise<Counter | null> {
    await this.loadMany([unitId]);
    return this.units.get(unitId) ?? null;
  }
  /** Looks up every unit named in a chunk of NDJSON that is not known yet, in one statement. */
  async prefetch(chunk: Buffer): Promise<void> {
    const missing = new Set<string>();
    for (const m of chunk.toString('latin1').matchAll(UNIT_ID_IN_LINE)) if (!this.units.has(m[1])) missing.add(m[1]);
    if (missing.size) await this.loadMany([...missing]);
  }
  private async loadMany(unitIds: string[]): Promise<void> {
    const found = await this.run.unitVersionsMany(unitIds);
    for (const id of unitIds) {
      const versions = found.get(id);
      this.units.set(id, versions?.length ? thermocoupleCounter(versions) : null);
    }
  }
}

/**
 * A unit id as lines name it. A hint only: a line written another way (spaces, escapes) or cut
 * by a chunk boundary has its unit looked up on its own when it is read.
 */
const UNIT_ID_IN_LINE = /"unitId"\s*:\s*"([a-z0-9-]{1,40})"/g;

function context(o: StreamIngestOptions, count: Counter): ValidationContext {
  return { nowMs: o.nowMs, futureToleranceS: o.futureToleranceS, bounds: o.bounds, thermocoupleCount: count };
}

async function* chunks(source: AsyncIterable<Buffer | string>): AsyncGenerator<Buffer> {
  for await (const c of source) yield typeof c === 'string' ? Buffer.from(c, 'utf8') : c;
}

/**
 * NDJSON: one JSON ring per line, each with "unitId" (or the default / override unit). A line
 * that is not JSON, names an unknown unit or one outside the caller's scope is rejected by its
 * line number; blank lines are skipped. When no line at all is JSON the body is malformed (400).
 */
export async function ingestNdjson(source: AsyncIterable<Buffer | string>, o: StreamIngestOptions): Promise<StreamSummary> {
  const run = o.run;
  const splitter = new LineSplitter(o.lineLimitBytes);
  const units = new UnitCache(run);
  const contexts = new Map<string, ValidationContext>();
  let bytes = 0;
  let records = 0;
  let parsed = 0;

  const handle = async (line: string, lineNo: number): Promise<void> => {
    if (line.length === 0 || /^\s*$/.test(line)) return;
    records++;
    let raw: unknown;
    try {
      raw = JSON.parse(line);
    } catch (err) {
      run.reject(lineNo, 'line', `is not JSON: ${(err as Error).message}`);
      return;
    }
    parsed++;
    if (typeof raw !== 'object' || raw === null || Array.isArray(raw)) {
      run.reject(lineNo, 'line', 'is not a JSON object');
      return;
    }
    const rec = raw as Record<string, unknown>;
    let unitId: string;
    if (o.overrideUnitId !== undefined) {
      unitId = o.overrideUnitId;
      delete rec.unitId;
    } else if (rec.unitId === undefined || rec.unitId === null) {
      if (o.defaultUnitId === undefined) {
        run.reject(lineNo, 'unitId', 'is required on every line');
        return;
      }
      unitId = o.defaultUnitId;
    } else if (typeof rec.unitId !== 'string') {
      run.reject(lineNo, 'unitId', 'is not text');
      return;
    } else {
      unitId = rec.unitId;
      if (o.defaultUnitId !== undefined && unitId !== o.defaultUnitId) {
        run.reject(lineNo, 'unitId', `names unit ${unitId}, but this stream is for unit ${o.defaultUnitId}`);
        return;
      }
    }
    if (!UNIT_ID_RE.test(unitId)) {
      run.reject(lineNo, 'unitId', `${JSON.stringify(unitId.slice(0, 60))} is not a unit id (lower-case letters, digits and dashes, 1–40)`);
      return;
    }
    if (o.mayWrite && !o.mayWrite(unitId)) {
      run.reject(lineNo, 'unitId', `this key may not write unit ${unitId}`);
      return;
    }
    let ctx = contexts.get(unitId);
    if (ctx === undefined) {
      let count = units.get(unitId);
      if (count === undefined) count = await units.load(unitId);
      if (count === null) {
        run.reject(lineNo, 'unitId', `no unit ${unitId} is registered`);
        return;
      }
      ctx = context(o, count);
      contexts.set(unitId, ctx);
    }
    const v = validateRing(rec, unitId, ctx);
    if (isRejection(v)) run.reject(lineNo, v.field, v.reason);
    else if (run.add(v)) await run.flush();
  };

  // The common form of a line is read straight from its bytes once its unit has been seen (and
  // checked) by the general way; any other line, and any ring the reader does not take, goes
  // through handle(), which gives the exact reason for a rejection.
  const reader = new RingBytesReader();
  const fast = (buf: Buffer, start: number, end: number): boolean => {
    if (!reader.read(buf, start, end)) return false;
    let unitId: string;
    if (o.overrideUnitId !== undefined) unitId = o.overrideUnitId;
    else {
      const named = reader.unitId();
      if (named === null) {
        if (o.defaultUnitId === undefined) return false;
        unitId = o.defaultUnitId;
      } else {
        if (o.defaultUnitId !== undefined && named !== o.defaultUnitId) return false;
        unitId = named;
      }
    }
    const ctx = contexts.get(unitId);
    if (ctx === undefined || !reader.check(unitId, ctx)) return false;
    records++;
    parsed++;
    return true;
  };

  for await (const chunk of chunks(source)) {
    bytes += chunk.length;
    // The units a chunk names are looked up together before its lines are read, so a request
    // for many units costs one lookup per chunk, not one per unit.
    if (o.overrideUnitId === undefined) await units.prefetch(chunk);
    const sp = splitter.spans(chunk);
    let lineNo = splitter.lineNo - sp.count;
    if (sp.joined !== null) {
      const j = sp.joined;
      lineNo++;
      if (fast(j, 0, j.length)) {
        if (run.add(reader.row)) await run.flush();
      } else await handle(j.toString('utf8'), lineNo);
    }
    const { starts, ends } = sp; // valid until the next spans() call
    for (let i = 0; i < starts.length; i++) {
      lineNo++;
      if (fast(chunk, starts[i], ends[i])) {
        if (run.add(reader.row)) await run.flush();
      } else await handle(chunk.toString('utf8', starts[i], ends[i]), lineNo);
    }
    o.onBytes?.(bytes);
  }
  const last = splitter.endSpan();
  if (last !== null) {
    if (fast(last, 0, last.length)) {
      if (run.add(reader.row)) await run.flush();
    } else await handle(last.toString('utf8'), splitter.lineNo);
  }
  if (records > 0 && parsed === 0) {
    throw badRequest('No line of the body is JSON; send one JSON object per line (application/x-ndjson). Nothing was stored.');
  }
  return { records };
}

// ---- CSV -------------------------------------------------------------------------------------

const CSV_SCALARS: Record<string, string> = {
  ts: 'ts',
  load_mw: 'loadMw',
  ambient_c: 'ambientC',
  ambient_kpa: 'ambientKPa',
  speed_pct: 'speedPct',
  cdt_c: 'cdtC',
  cdp_kpa: 'cdpKPa',
  fuel_flow_kg_s: 'fuelFlowKgS',
  flame_detected: 'flameDetected',
  cold_junction_c: 'coldJunctionC',
  mode: 'mode',
};
const CSV_REQUIRED = ['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct'];
const TC_RE = /^tc(\d{1,3})(_f|_mv)?$/;
const NUMBER_RE = /^\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\s*$/;
const MISSING = new Set(['', 'nan', 'NaN', 'NAN', 'null', 'NULL']);

/** Splits one CSV line (RFC 4180 quoting within a line); null when a quote is left open. */
export function splitCsvLine(line: string): string[] | null {
  if (line.indexOf('"') === -1) return line.split(',');
  const out: string[] = [];
  let i = 0;
  for (;;) {
    if (line[i] === '"') {
      let v = '';
      i++;
      for (;;) {
        const q = line.indexOf('"', i);
        if (q === -1) return null;
        v += line.slice(i, q);
        if (line[q + 1] === '"') {
          v += '"';
          i = q + 2;
        } else {
          i = q + 1;
          break;
        }
      }
      out.push(v);
      if (i >= line.length) return out;
      if (line[i] !== ',') return null;
      i++;
    } else {
      const c = line.indexOf(',', i);
      if (c === -1) {
        out.push(line.slice(i));
        return out;
      }
      out.push(line.slice(i, c));
      i = c + 1;
    }
  }
}

interface CsvLayout {
  /** Per column: the ring field it fills, or a thermocouple index. */
  scalar: (string | null)[];
  tc: number[];
  tcCount: number;
  exhaustField: 'exhaustC' | 'exhaustF' | 'exhaustMv';
  columns: string[];
}

/** Reads the header row; every problem with it is request-wide (422), listed together. */
export function csvLayout(header: string): CsvLayout {
  const cells = splitCsvLine(header);
  if (cells === null) throw unprocessable('The CSV header row has an unclosed quote.');
  const columns = cells.map((c) => c.trim().toLowerCase());
  const problems: { field: string; reason: string }[] = [];
  const scalar: (string | null)[] = [];
  const tc: number[] = [];
  const kinds = new Set<string>();
  const tcSeen = new Set<number>();
  const seen = new Set<string>();
  columns.forEach((name, i) => {
    if (seen.has(name)) problems.push({ field: name, reason: 'appears twice in the header' });
    seen.add(name);
    scalar.push(null);
    tc.push(-1);
    if (CSV_SCALARS[name] !== undefined) {
      scalar[i] = CSV_SCALARS[name];
      return;
    }
    const m = TC_RE.exec(name);
    if (m) {
      const n = Number(m[1]);
      if (n < 1) {
        problems.push({ field: name, reason: 'thermocouples are numbered from 1' });
        return;
      }
      tc[i] = n - 1;
      tcSeen.add(n);
      kinds.add(m[2] ?? '');
      return;
    }
    problems.push({
      field: name || `column ${i + 1}`,
      reason: `is not a known column (expected ${CSV_REQUIRED.join(', ')}, tc1…tcM, and optionally cdt_c, cdp_kpa, fuel_flow_kg_s, flame_detected, cold_junction_c, mode)`,
    });
  });
  for (const r of CSV_REQUIRED) if (!seen.has(r)) problems.push({ field: r, reason: 'is a required column' });
  const tcCount = tcSeen.size;
  if (tcCount === 0) problems.push({ field: 'tc1', reason: 'the header has no thermocouple columns (tc1…tcM in °C, tc1_f… in °F, or tc1_mv… in mV)' });
  for (let n = 1; n <= tcCount; n++) if (!tcSeen.has(n)) problems.push({ field: `tc${n}`, reason: `is missing: thermocouple columns must run tc1…tc${tcCount} without a gap` });
  if (kinds.size > 1) problems.push({ field: 'tc1', reason: 'mixes °C, °F (_f) and mV (_mv) thermocouple columns; use one kind' });
  const kind = [...kinds][0] ?? '';
  if (kind === '_mv' && !seen.has('cold_junction_c')) problems.push({ field: 'cold_junction_c', reason: 'is required with millivolt (tcN_mv) columns' });
  if (problems.length) {
    throw unprocessable(`The CSV header is not usable: ${problems.slice(0, 5).map((p) => `${p.field} ${p.reason}`).join('; ')}. Nothing was stored.`, problems);
  }
  return { scalar, tc, tcCount, exhaustField: kind === '_f' ? 'exhaustF' : kind === '_mv' ? 'exhaustMv' : 'exhaustC', columns };
}

function csvNumber(cell: string): number | string | undefined {
  if (cell === '') return undefined;
  return NUMBER_RE.test(cell) ? Number(cell) : cell;
}

/** The ring field name as a CSV column, for rejection reports. */
function csvField(field: string, layout: CsvLayout): string {
  const dot = field.indexOf('.');
  if (dot !== -1 && field.startsWith('exhaust')) {
    const suffix = layout.exhaustField === 'exhaustF' ? '_f' : layout.exhaustField === 'exhaustMv' ? '_mv' : '';
    return `tc${Number(field.slice(dot + 1)) + 1}${suffix}`;
  }
  for (const [col, f] of Object.entries(CSV_SCALARS)) if (f === field) return col;
  return field;
}

/**
 * CSV for one unit: the header row names the columns (snake case, thermocouples tc1…tcM), then
 * one ring per row; rows are numbered from 1 after the header. An empty cell is a missing value;
 * NaN or null in a thermocouple cell is a missing reading.
 */
export async function ingestCsv(source: AsyncIterable<Buffer | string>, unitId: string, count: Counter, o: StreamIngestOptions): Promise<StreamSummary> {
  const run = o.run;
  const splitter = new LineSplitter(o.lineLimitBytes);
  const ctx = context(o, count);
  let layout: CsvLayout | null = null;
  let row = 0;
  let bytes = 0;

  const handle = async (line: string): Promise<void> => {
    if (layout === null) {
      if (line.trim() === '') return;
      layout = csvLayout(line);
      return;
    }
    if (line.length === 0) return;
    row++;
    const cells = splitCsvLine(line);
    if (cells === null) {
      run.reject(row, 'row', 'has an unclosed quote');
      return;
    }
    if (cells.length !== layout.columns.length) {
      run.reject(row, 'row', `has ${cells.length} fields; the header has ${layout.columns.length}`);
      return;
    }
    const rec: Record<string, unknown> = {};
    const readings: (number | string | null)[] = new Array(layout.tcCount);
    for (let i = 0; i < cells.length; i++) {
      const t = layout.tc[i];
      const cell = cells[i];
      if (t >= 0) {
        const c = cell.trim();
        readings[t] = MISSING.has(c) ? null : NUMBER_RE.test(c) ? Number(c) : c;
        continue;
      }
      const f = layout.scalar[i]!;
      if (f === 'ts') rec.ts = cell.trim() === '' ? undefined : cell.trim();
      else if (f === 'mode') rec.mode = cell.trim() === '' ? undefined : cell.trim();
      else if (f === 'flameDetected') {
        const c = cell.trim().toLowerCase();
        rec.flameDetected = c === '' ? undefined : c === 'true' || c === '1' ? true : c === 'false' || c === '0' ? false : cell;
      } else rec[f] = csvNumber(cell);
    }
    rec[layout.exhaustField] = readings;
    const v = validateRing(rec, unitId, ctx);
    if (isRejection(v)) run.reject(row, csvField(v.field, layout), v.reason);
    else if (run.add(v)) await run.flush();
  };

  for await (const chunk of chunks(source)) {
    bytes += chunk.length;
    for (const line of splitter.push(chunk)) await handle(line);
    o.onBytes?.(bytes);
  }
  for (const line of splitter.end()) await handle(line);
  if (layout === null && bytes > 0) throw unprocessable('The CSV body has no header row. Nothing was stored.');
  return { records: row };
}
