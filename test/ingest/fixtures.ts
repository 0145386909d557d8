/**
 * Rings for the ingest tests: a valid ring for an 18-thermocouple unit (the test unit of
 * test/helpers/app.ts), as JSON, an NDJSON line or a CSV row, at a chosen time.
 */
import { chmod, mkdtemp, rm } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';
import { bearer, type TestApp, unitBody } from '../helpers/app.ts';
import { createTestDatabase } from '../helpers/db.ts';
import { importCommand, type ImportIo } from '../../services/cli/import.ts';
import type { Config } from '../../services/db/config.ts';
import { createLogger } from '../../services/db/logger.ts';
import { createUnitsRepository } from '../../services/db/units.ts';

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
  const res = await t.send({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id, overrides) });
  if (res.statusCode !== 201) throw new Error(`registering ${id}: ${res.statusCode} ${res.body}`);
}

export async function postBatch(t: TestApp, unitId: string, rings: unknown[], key = t.keys.ingest) {
  return t.send({ method: 'POST', url: `/v1/units/${unitId}/rings`, headers: bearer(key), payload: { rings } });
}

export async function postNdjson(t: TestApp, body: string, key = t.keys.ingest, url = '/v1/rings') {
  return t.send({ method: 'POST', url, headers: { ...bearer(key), 'content-type': 'application/x-ndjson' }, payload: body });
}

export async function postCsv(t: TestApp, unitId: string, body: string, key = t.keys.ingest) {
  return t.send({ method: 'POST', url: `/v1/units/${unitId}/rings`, headers: { ...bearer(key), 'content-type': 'text/csv' }, payload: body });
}

export async function count(t: TestApp, unitId?: string): Promise<number> {
  const { rows } = await t.db.pool.query(`SELECT count(*)::int AS n FROM rings WHERE $1::text IS NULL OR unit_id = $1`, [unitId ?? null]);
  return rows[0].n;
}

/**
 * What the import tests run on: a test database with these units registered (the test unit of
 * test/helpers/app.ts under each id), a scratch folder for the files, and `run`, which calls
 * `cansight import` with its output kept. close() removes both.
 */
export async function importSetup(prefix: string, unitIds: string[], config: Config) {
  const db = await createTestDatabase();
  const dir = await mkdtemp(path.join(os.tmpdir(), prefix));
  await chmod(dir, 0o777);
  const units = createUnitsRepository(db.pool);
  for (const id of unitIds) {
    const { id: _, name, site, ...c } = unitBody(id);
    await units.create({ id, name, site }, c as never, 'test');
  }
  const logger = createLogger('silent');
  return {
    db,
    dir,
    async run(args: string[], o: { tty?: boolean; waitStallMs?: number } = {}) {
      const out: string[] = [];
      let err = '';
      const io: ImportIo = { stdout: (l) => out.push(l), stderr: { isTTY: o.tty ?? false, write: (s: string) => (err += s) } };
      const code = await importCommand(args, { pool: db.pool, config, logger, waitStallMs: o.waitStallMs }, io);
      return { code, out, err };
    },
    async close() {
      await db.drop();
      await rm(dir, { recursive: true, force: true });
    },
  };
}
