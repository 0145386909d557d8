/**
 * Rings read for analysis: a unit's rings after its watermark, of several units in one COPY, or
 * in a window, decoded from binary COPY straight into columns (readings °C, NaN where missing).
 */
import type pg from 'pg';
import { CopyBinaryReader, copyOut, isoMicros, type Float64Arena } from './pg-binary.ts';
import { lit, tsLit } from './sql.ts';

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
  /** Combustion mode code per ring (null where none was sent); left out: no ring has one. */
  mode?: (string | null)[];
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
  private mode: (string | null)[] = [];
  private anyMode = false;

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
    const m = r.text();
    if (m !== null) this.anyMode = true;
    this.mode.push(m);
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
      ...(this.anyMode ? { mode: this.mode } : {}),
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

const RING_READ_COLUMNS = 'ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c, fuel_flow_kg_s, flame_detected, mode';

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
