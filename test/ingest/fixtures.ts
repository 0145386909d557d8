/**
 * Rings for the ingest tests: a valid ring for an 18-thermocouple unit (the test unit of
 * test/helpers/app.ts), as JSON, an NDJSON line or a CSV row, at a chosen time.
 */
import { bearer, type TestApp, unitBody } from '../helpers/app.ts';

export const TC = 18;
/** 2026-01-15T00:00:00Z plus i seconds: inside the partitions the migration makes ahead. */
export const BASE_MS = Date.UTC(2026, 0, 15);
export const tsAt = (i: number, base = BASE_MS) => new Date(base + i * 1000).toISOString();

export function ring(i: number, extra: Record<string, unknown> = {}, base = BASE_MS): Record<string, unknown> {
  const exhaustC: (number | null)[] = [];
  for (let k = 0; k < TC; k++) exhaustC.push(550 + ((i * 7 + k * 13) % 20) + 0.25);
  return { ts: tsAt(i, base), loadMw: 21.4, ambientC: 12.5, ambientKPa: 100.9, speedPct: 100, exhaustC, ...extra };
}

export const ndjson = (rows: Record<string, unknown>[]) => rows.map((r) => JSON.stringify(r)).join('\n') + '\n';

export function csv(rows: Record<string, unknown>[], tc = TC): string {
  const head = ['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct', ...Array.from({ length: tc }, (_, k) => `tc${k + 1}`)];
  const lines = rows.map((r) => [r.ts, r.loadMw, r.ambientC, r.ambientKPa, r.speedPct, ...(r.exhaustC as (number | null)[]).map((v) => (v === null ? '' : v))].join(','));
  return [head.join(','), ...lines].join('\n') + '\n';
}

export async function registerUnit(t: TestApp, id: string, overrides: Record<string, unknown> = {}): Promise<void> {
  const res = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id, overrides) });
  if (res.statusCode !== 201) throw new Error(`registering ${id}: ${res.statusCode} ${res.body}`);
}

export async function postBatch(t: TestApp, unitId: string, rings: unknown[], key = t.keys.ingest) {
  return t.app.inject({ method: 'POST', url: `/v1/units/${unitId}/rings`, headers: bearer(key), payload: { rings } });
}

export async function postNdjson(t: TestApp, body: string, key = t.keys.ingest, url = '/v1/rings') {
  return t.app.inject({ method: 'POST', url, headers: { ...bearer(key), 'content-type': 'application/x-ndjson' }, payload: body });
}

export async function postCsv(t: TestApp, unitId: string, body: string, key = t.keys.ingest) {
  return t.app.inject({ method: 'POST', url: `/v1/units/${unitId}/rings`, headers: { ...bearer(key), 'content-type': 'text/csv' }, payload: body });
}

export async function count(t: TestApp, unitId?: string): Promise<number> {
  const { rows } = await t.db.pool.query(`SELECT count(*)::int AS n FROM rings WHERE $1::text IS NULL OR unit_id = $1`, [unitId ?? null]);
  return rows[0].n;
}
