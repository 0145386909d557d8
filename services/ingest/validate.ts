/**
 * Validation of one ring as it arrives (a parsed JSON object, an NDJSON line or a CSV row
 * turned into the same shape): either the normalised ring, ready to store, or the first
 * problem found as { field, reason }. Pure: the time now, the bounds and the unit's
 * thermocouple count come in as arguments. Every entry point (JSON batch, NDJSON, CSV, the
 * import command) goes through validateRing and nothing else.
 *
 * What is checked: the time (RFC 3339 with offset, a real calendar instant, not too far in the
 * future), every number field (a number, inside its physical bounds), exactly one of
 * exhaustC / exhaustF / exhaustMv with one reading per thermocouple of the configuration in
 * force at that time. A reading that is possible but implausible is stored as sent; judging a
 * thermocouple is the analysis' job. °F and Type K millivolts are converted to °C here.
 */
import { fahrenheitToCelsius, typeKCompensatedC } from '../core/temperature.ts';
import type { IngestBounds, Range } from '../db/config.ts';
import type { RingRow } from '../db/rings.ts';

export interface Rejection {
  field: string;
  reason: string;
}

export interface ValidationContext {
  /** The time the ring is judged against, ms since 1970. */
  nowMs: number;
  futureToleranceS: number;
  bounds: IngestBounds;
  /** Thermocouple count of the unit's configuration in force at tsMs; undefined if none. */
  thermocoupleCount(tsMs: number): number | undefined;
}

export function isRejection(v: RingRow | Rejection): v is Rejection {
  return (v as Rejection).reason !== undefined;
}

/** Field names of a ring, with what each holds, for messages. */
const RING_FIELDS = new Set([
  'unitId', 'ts', 'loadMw', 'ambientC', 'ambientKPa', 'speedPct', 'cdtC', 'cdpKPa', 'fuelFlowKgS',
  'flameDetected', 'exhaustC', 'exhaustF', 'exhaustMv', 'coldJunctionC', 'mode',
]);

/** A combustion mode code: 1–16 letters, digits, '-', '_' or '.'. */
export const MODE_RE = /^[A-Za-z0-9_.-]{1,16}$/;

const EARLIEST_MS = 0; // 1970-01-01T00:00:00Z

const TIME_RE = /^(\d{4})-(\d{2})-(\d{2})[Tt ](\d{2}):(\d{2}):(\d{2})(?:\.(\d{1,9}))?(?:([Zz])|([+-])(\d{2}):(\d{2}))$/;
const DAYS = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];

/**
 * Milliseconds since 1970 for an RFC 3339 time with an offset ("Z" or ±hh:mm), or a reason it
 * is not one. Fractions below the millisecond are dropped. Calendar fields are checked (no
 * 30 February, no hour 24, no leap second: a ring cannot be stored at 23:59:60).
 */
export function parseRfc3339(text: string): number | string {
  const m = TIME_RE.exec(text);
  if (m === null) return 'is not an RFC 3339 time with offset (e.g. 2026-03-01T10:00:00Z)';
  const y = +m[1];
  const mo = +m[2];
  const d = +m[3];
  const h = +m[4];
  const mi = +m[5];
  const s = +m[6];
  if (mo < 1 || mo > 12) return `has month ${m[2]}`;
  const leap = (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;
  const dim = mo === 2 && leap ? 29 : DAYS[mo - 1];
  if (d < 1 || d > dim) return `has day ${m[3]}, but that month has ${dim} days`;
  if (h > 23) return `has hour ${m[4]}`;
  if (mi > 59) return `has minute ${m[5]}`;
  if (s > 59) return `has second ${m[6]}`;
  let ms = Date.UTC(y, mo - 1, d, h, mi, s);
  if (y < 100) ms = new Date(ms).setUTCFullYear(y);
  if (m[7] !== undefined) ms += Math.floor(Number('0.' + m[7]) * 1000);
  if (m[9] !== undefined) {
    const oh = +m[10];
    const om = +m[11];
    if (oh > 23 || om > 59) return `has offset ${m[9]}${m[10]}:${m[11]}`;
    const off = (oh * 60 + om) * 60_000;
    ms += m[9] === '+' ? -off : off;
  }
  return ms;
}

function describe(v: unknown): string {
  if (typeof v === 'string') return `text ${JSON.stringify(v.length > 40 ? v.slice(0, 40) + '…' : v)}`;
  if (Array.isArray(v)) return 'a list';
  if (v === null) return 'null';
  return typeof v === 'object' ? 'an object' : String(v);
}

const UNITS_OF: Record<string, string> = {
  loadMw: 'MW', ambientC: '°C', ambientKPa: 'kPa', speedPct: '%', cdtC: '°C', cdpKPa: 'kPa',
  fuelFlowKgS: 'kg/s', coldJunctionC: '°C',
};

function outside(value: number, b: Range, unit: string): string {
  return `${value} ${unit} is outside the physical bounds ${b.min}…${b.max} ${unit}`;
}

/** A required number inside its bounds: the number, or a Rejection. */
function requiredNumber(raw: Record<string, unknown>, field: string, b: Range): number | Rejection {
  const v = raw[field];
  if (v === undefined || v === null) return { field, reason: 'is required' };
  if (typeof v !== 'number' || !Number.isFinite(v)) return { field, reason: `is not a number (got ${describe(v)})` };
  if (v < b.min || v > b.max) return { field, reason: outside(v, b, UNITS_OF[field]) };
  return v;
}

function optionalNumber(raw: Record<string, unknown>, field: string, b: Range): number | null | Rejection {
  const v = raw[field];
  if (v === undefined || v === null) return null;
  if (typeof v !== 'number' || !Number.isFinite(v)) return { field, reason: `is not a number (got ${describe(v)})` };
  if (v < b.min || v > b.max) return { field, reason: outside(v, b, UNITS_OF[field]) };
  return v;
}

const bad = (v: unknown): v is Rejection => typeof v === 'object' && v !== null;

/**
 * Checks one ring for `unitId`. A ring may name its unit itself (`unitId`); it must then be
 * that unit. Returns the normalised ring (readings in °C, NaN for a missing reading) or the
 * first problem found.
 */
export function validateRing(raw: unknown, unitId: string, ctx: ValidationContext): RingRow | Rejection {
  if (typeof raw !== 'object' || raw === null || Array.isArray(raw)) {
    return { field: 'ring', reason: `is not an object (got ${describe(raw)})` };
  }
  const r = raw as Record<string, unknown>;
  for (const key in r) {
    if (!RING_FIELDS.has(key)) return { field: key, reason: 'is not a ring field' };
  }
  if (r.unitId !== undefined && r.unitId !== unitId) {
    return { field: 'unitId', reason: `names unit ${describe(r.unitId)}, but these rings are for unit ${unitId}` };
  }

  const tsRaw = r.ts;
  if (tsRaw === undefined || tsRaw === null) return { field: 'ts', reason: 'is required' };
  if (typeof tsRaw !== 'string') return { field: 'ts', reason: `is not a time (got ${describe(tsRaw)}); send RFC 3339 text such as 2026-03-01T10:00:00Z` };
  const tsMs = parseRfc3339(tsRaw);
  if (typeof tsMs === 'string') return { field: 'ts', reason: `${JSON.stringify(tsRaw)} ${tsMs}` };
  if (tsMs < EARLIEST_MS) return { field: 'ts', reason: `${tsRaw} is before 1970-01-01` };
  const aheadS = (tsMs - ctx.nowMs) / 1000;
  if (aheadS > ctx.futureToleranceS) {
    return { field: 'ts', reason: `${tsRaw} is ${Math.round(aheadS)} s in the future; at most ${ctx.futureToleranceS} s is accepted (check the sender's clock)` };
  }

  const b = ctx.bounds;
  const loadMw = requiredNumber(r, 'loadMw', b.loadMw);
  if (bad(loadMw)) return loadMw;
  const ambientC = requiredNumber(r, 'ambientC', b.ambientC);
  if (bad(ambientC)) return ambientC;
  const ambientKPa = requiredNumber(r, 'ambientKPa', b.ambientKPa);
  if (bad(ambientKPa)) return ambientKPa;
  const speedPct = requiredNumber(r, 'speedPct', b.speedPct);
  if (bad(speedPct)) return speedPct;
  const cdtC = optionalNumber(r, 'cdtC', b.cdtC);
  if (bad(cdtC)) return cdtC;
  const cdpKPa = optionalNumber(r, 'cdpKPa', b.cdpKPa);
  if (bad(cdpKPa)) return cdpKPa;
  const fuelFlowKgS = optionalNumber(r, 'fuelFlowKgS', b.fuelFlowKgS);
  if (bad(fuelFlowKgS)) return fuelFlowKgS;
  const flame = r.flameDetected;
  if (flame !== undefined && flame !== null && typeof flame !== 'boolean') {
    return { field: 'flameDetected', reason: `is not true or false (got ${describe(flame)})` };
  }

  const mode = r.mode;
  if (mode !== undefined && mode !== null && (typeof mode !== 'string' || !MODE_RE.test(mode))) {
    return { field: 'mode', reason: `is not a combustion mode code of 1 to 16 letters, digits, '-', '_' or '.' (got ${describe(mode)})` };
  }

  const given = (r.exhaustC != null ? 1 : 0) + (r.exhaustF != null ? 1 : 0) + (r.exhaustMv != null ? 1 : 0);
  if (given === 0) return { field: 'exhaustC', reason: 'is required (or exhaustF in °F, or exhaustMv in Type K millivolts with coldJunctionC)' };
  const field = r.exhaustC != null ? 'exhaustC' : r.exhaustF != null ? 'exhaustF' : 'exhaustMv';
  if (given > 1) return { field, reason: 'give only one of exhaustC, exhaustF and exhaustMv' };
  let coldJunctionC = 0;
  if (field === 'exhaustMv') {
    const cj = requiredNumber(r, 'coldJunctionC', b.coldJunctionC);
    if (bad(cj)) return cj.reason === 'is required' ? { field: 'coldJunctionC', reason: 'is required with exhaustMv (the reference junction temperature, °C)' } : cj;
    coldJunctionC = cj;
  } else if (r.coldJunctionC != null) {
    return { field: 'coldJunctionC', reason: 'belongs only with exhaustMv' };
  }
  const list = r[field];
  if (!Array.isArray(list)) return { field, reason: `is not a list of readings (got ${describe(list)})` };
  const expected = ctx.thermocoupleCount(tsMs);
  if (expected === undefined) return { field: 'ts', reason: `unit ${unitId} has no configuration in force at ${tsRaw}` };
  if (list.length !== expected) {
    return { field, reason: `has ${list.length} readings, but unit ${unitId} has ${expected} thermocouples at ${tsRaw}` };
  }

  const lo = b.exhaustC.min;
  const hi = b.exhaustC.max;
  const out = new Float64Array(expected);
  for (let i = 0; i < expected; i++) {
    const v = list[i];
    if (v === null) {
      out[i] = NaN;
      continue;
    }
    if (typeof v !== 'number' || !Number.isFinite(v)) {
      return { field: `${field}.${i}`, reason: `thermocouple ${i + 1}: is not a number or null (got ${describe(v)})` };
    }
    let c = v;
    if (field === 'exhaustF') c = fahrenheitToCelsius(v);
    else if (field === 'exhaustMv') {
      c = typeKCompensatedC(v, coldJunctionC);
      if (Number.isNaN(c)) return { field: `${field}.${i}`, reason: `thermocouple ${i + 1}: ${v} mV is outside the Type K reference range` };
    }
    if (c < lo || c > hi) {
      const shown = field === 'exhaustC' ? `${v} °C` : field === 'exhaustF' ? `${v} °F (${c.toFixed(1)} °C)` : `${v} mV (${c.toFixed(1)} °C)`;
      return { field: `${field}.${i}`, reason: `thermocouple ${i + 1}: ${shown} is outside the physical bounds ${lo}…${hi} °C` };
    }
    out[i] = c;
  }

  return {
    unitId,
    tsMs,
    loadMw,
    ambientC,
    ambientKPa,
    speedPct,
    cdtC,
    cdpKPa,
    fuelFlowKgS,
    flameDetected: typeof flame === 'boolean' ? flame : null,
    exhaustC: out,
    // Only a ring that has one carries it (the byte reader's rings, which never do, are the same).
    ...(typeof mode === 'string' ? { mode } : {}),
  };
}

/**
 * Thermocouple count lookup over a unit's configuration versions: the version in force at t is
 * the one with the latest effective time ≤ t (null effective time: from the beginning).
 */
export function thermocoupleCounter(versions: { effectiveFrom: string | null; config: { thermocouples: { count: number } } }[]): (tsMs: number) => number | undefined {
  const spans = versions
    .map((v) => ({ from: v.effectiveFrom === null ? -Infinity : Date.parse(v.effectiveFrom), count: v.config.thermocouples.count }))
    .sort((a, b) => a.from - b.from);
  if (spans.length === 1 && spans[0].from === -Infinity) {
    const n = spans[0].count;
    return () => n;
  }
  return (t) => {
    let found: number | undefined;
    for (const s of spans) {
      if (s.from <= t) found = s.count;
      else break;
    }
    return found;
  };
}
