/**
 * Maintenance events repository (table maintenance_events): what people record through the API
 * (create, list, delete) and what the worker needs of them: the thermocouple replacements of a
 * unit with the offsets learnt so far, and the writing of a learnt offset.
 */
import type pg from 'pg';
import { NEW_PERIOD_KINDS, type PeriodEvent } from '../core/baseline-periods.ts';
import { requestReanalysis } from './progress.ts';

type Queryable = Pick<pg.ClientBase, 'query'>;

export const EVENT_KINDS = ['thermocouple_replaced', 'nozzles_worked', 'combustion_inspection', 'combustor_tuning', 'compressor_wash', 'other'] as const;
export type EventKind = (typeof EVENT_KINDS)[number];

export interface MaintenanceEvent {
  id: string;
  unitId: string;
  kind: EventKind;
  /** Ring time the work took effect. */
  at: string;
  thermocouples: number[] | null;
  chambers: number[] | null;
  by: string;
  note: string | null;
  recordedAt: string;
  /** Per replaced thermocouple (numbered from 1, as a string key): its offset learnt against the baseline, °C. */
  learntOffsetsC: Record<string, number>;
}

const iso = (v: unknown): string => (v instanceof Date ? v.toISOString() : String(v));

function eventFromDb(r: Record<string, unknown>): MaintenanceEvent {
  return {
    id: String(r.id),
    unitId: String(r.unit_id),
    kind: r.kind as EventKind,
    at: iso(r.at),
    thermocouples: (r.thermocouples as number[] | null) ?? null,
    chambers: (r.chambers as number[] | null) ?? null,
    by: String(r.recorded_by),
    note: (r.note as string | null) ?? null,
    recordedAt: iso(r.recorded_at),
    learntOffsetsC: (r.learnt_offsets as Record<string, number>) ?? {},
  };
}

const COLUMNS = 'id, unit_id, kind, at, thermocouples, chambers, recorded_by, note, recorded_at, learnt_offsets';

/** The events of a unit with `at` in [fromMs, toMs) (either end open when left out), oldest first. */
export async function unitEvents(q: Queryable, unitId: string, fromMs?: number, toMs?: number): Promise<MaintenanceEvent[]> {
  const { rows } = await q.query(
    `SELECT ${COLUMNS} FROM maintenance_events WHERE unit_id = $1 AND ($2::timestamptz IS NULL OR at >= $2) AND ($3::timestamptz IS NULL OR at < $3) ORDER BY at, recorded_at`,
    [unitId, fromMs === undefined ? null : new Date(fromMs), toMs === undefined ? null : new Date(toMs)],
  );
  return rows.map(eventFromDb);
}

/** A probe replacement as the analysis needs it. */
export interface ProbeReplacement {
  eventId: string;
  atMs: number;
  /** Index from 0. */
  thermocouple: number;
  /** Learnt offset, °C; null while not learnt yet. */
  learntOffsetC: number | null;
}

/** Every thermocouple replacement of a unit, oldest first, one entry per probe. */
export async function probeReplacements(q: Queryable, unitId: string): Promise<ProbeReplacement[]> {
  const events = (await unitEvents(q, unitId)).filter((e) => e.kind === 'thermocouple_replaced');
  return events.flatMap((e) =>
    (e.thermocouples ?? []).map((tc) => ({ eventId: e.id, atMs: Date.parse(e.at), thermocouple: tc - 1, learntOffsetC: Number.isFinite(e.learntOffsetsC[String(tc)]) ? e.learntOffsetsC[String(tc)] : null })),
  );
}

/** The events of a unit that start a new baseline period (core/baseline-periods.ts), oldest first. */
export async function periodEvents(q: Queryable, unitId: string): Promise<PeriodEvent[]> {
  const { rows } = await q.query(
    `SELECT kind, (extract(epoch from at) * 1000)::float8 AS at_ms, chambers FROM maintenance_events WHERE unit_id = $1 AND kind = ANY($2::text[]) ORDER BY at, recorded_at`,
    [unitId, NEW_PERIOD_KINDS],
  );
  return rows.map((r: { kind: string; at_ms: number; chambers: number[] | null }) => ({ kind: r.kind, atMs: Number(r.at_ms), chambers: r.chambers ?? null }));
}

/** Kinds whose recording changes how rings are judged: recorded or removed in the past, the rings after them are judged again. */
export const ANALYSED_EVENT_KINDS: readonly string[] = ['thermocouple_replaced', ...NEW_PERIOD_KINDS];

/** Records the offset learnt for one replaced probe (worker). */
export async function recordLearntOffset(q: Queryable, unitId: string, eventId: string, thermocouple: number, offsetC: number): Promise<void> {
  await q.query(`UPDATE maintenance_events SET learnt_offsets = learnt_offsets || jsonb_build_object($3::text, $4::float8) WHERE unit_id = $1 AND id = $2`, [unitId, eventId, String(thermocouple + 1), offsetC]);
}

export function createEventsRepository(pool: pg.Pool) {
  return {
    /**
     * Records an event. One that changes how rings are judged (ANALYSED_EVENT_KINDS), at or
     * before the unit's analysis watermark, asks for the rings from its time on to be judged
     * again (requestReanalysis), in the same transaction: history then gives the answer the
     * rings would have had with the event recorded before them.
     */
    async create(e: { unitId: string; kind: EventKind; at: Date; thermocouples: number[] | null; chambers: number[] | null; by: string; note: string | null; keyId: string | null }): Promise<MaintenanceEvent & { reanalysed: boolean }> {
      const client = await pool.connect();
      try {
        await client.query('BEGIN');
        const { rows } = await client.query(
          `INSERT INTO maintenance_events (unit_id, kind, at, thermocouples, chambers, recorded_by, note, key_id) VALUES ($1, $2, $3, $4, $5, $6, $7, $8) RETURNING ${COLUMNS}`,
          [e.unitId, e.kind, e.at, e.thermocouples, e.chambers, e.by, e.note, e.keyId],
        );
        const reanalysed = ANALYSED_EVENT_KINDS.includes(e.kind) ? await requestReanalysis(client, e.unitId, e.at.getTime()) : false;
        await client.query('COMMIT');
        return { ...eventFromDb(rows[0]), reanalysed };
      } catch (err) {
        await client.query('ROLLBACK').catch(() => {});
        throw err;
      } finally {
        client.release();
      }
    },
    list: (unitId: string, fromMs?: number, toMs?: number) => unitEvents(pool, unitId, fromMs, toMs),
    /**
     * Deletes one event; false when the unit has no such event. Removing one that changed how
     * rings were judged, at or before the watermark, has them judged again from its time, and
     * the baseline fitted automatically for the period it started (its window from the event's
     * time on, fitted by the worker) goes with it unless another such event shares that time:
     * the rings are then judged as if the event had never been recorded.
     */
    async remove(unitId: string, id: string): Promise<boolean> {
      if (!/^[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}$/i.test(id)) return false;
      const client = await pool.connect();
      try {
        await client.query('BEGIN');
        const { rows } = await client.query(`DELETE FROM maintenance_events WHERE unit_id = $1 AND id = $2 RETURNING kind, at`, [unitId, id]);
        if (rows.length === 0) {
          await client.query('ROLLBACK');
          return false;
        }
        const kind = rows[0].kind as string;
        const at = rows[0].at as Date;
        if ((NEW_PERIOD_KINDS as readonly string[]).includes(kind)) {
          await client.query(
            `DELETE FROM baselines b WHERE b.unit_id = $1 AND b.fitted_by = 'automatic' AND b.window_from = $2
                AND NOT EXISTS (SELECT 1 FROM maintenance_events e WHERE e.unit_id = $1 AND e.at = $2 AND e.kind = ANY($3::text[]))`,
            [unitId, at, NEW_PERIOD_KINDS],
          );
        }
        if (ANALYSED_EVENT_KINDS.includes(kind)) await requestReanalysis(client, unitId, at.getTime());
        await client.query('COMMIT');
        return true;
      } catch (err) {
        await client.query('ROLLBACK').catch(() => {});
        throw err;
      } finally {
        client.release();
      }
    },
  };
}
