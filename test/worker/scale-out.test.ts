/**
 * Several worker processes on one fleet, sharing it through PostgreSQL alone: two workers split
 * the units between them (each unit held by one, both holding some), a third joins and the
 * shares even out, then one is killed with -9 and its units are taken over when their leases
 * expire. Throughout, every ring is analysed exactly once and no two batches of a unit overlap.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { analysisTotals } from '../../services/db/progress.ts';
import { listClaims } from '../../services/db/claims.ts';
import { expectEveryRingAnalysedOnce, healthyUnit, registerUnit, simulate, until, waitForAnalysis, writeRings } from './fixtures.ts';
import { startWorkerProcess, type WorkerProcess } from './processes.ts';

const UNITS = ['so-1', 'so-2', 'so-3', 'so-4', 'so-5', 'so-6'].map((id) => healthyUnit(id));
const PROCESS_ENV = { CANSIGHT_WORKER_BATCH_RINGS: '300', CANSIGHT_WORKER_CONCURRENCY: '1' };
let db: TestDatabase;
const procs = new Map<string, WorkerProcess>();
let stored = 0;

async function writeDays(from: string, to: string, seed: number): Promise<void> {
  for (const [i, u] of UNITS.entries()) stored += await writeRings(db.pool, simulate(u, from, to, seed + i));
}

async function holders(): Promise<Map<string, string[]>> {
  const m = new Map<string, string[]>();
  for (const c of await listClaims(db.pool)) {
    if (!c.workerId || !c.leaseUntil || c.leaseUntil.getTime() < Date.now()) continue;
    m.set(c.workerId, [...(m.get(c.workerId) ?? []), c.unitId]);
  }
  return m;
}

async function checkExactlyOnce(): Promise<void> {
  await expectEveryRingAnalysedOnce(db.pool, stored);
}

const start = (id: string) => {
  const p = startWorkerProcess(db.url, id, PROCESS_ENV);
  procs.set(id, p);
  return p;
};

beforeAll(async () => {
  db = await createTestDatabase();
  for (const u of UNITS) await registerUnit(db.pool, u);
  await writeDays('2026-08-01T00:00:00Z', '2026-08-03T00:00:00Z', 30);
}, 60_000);

afterAll(async () => {
  for (const p of procs.values()) await p.kill();
  await db?.drop();
});

describe('workers sharing a fleet', () => {
  it('two workers: each unit held by one of them, both holding an even share, everything analysed once', async () => {
    start('so-a');
    start('so-b');
    await until(async () => {
      const h = await holders();
      return h.get('so-a')?.length === 3 && h.get('so-b')?.length === 3;
    });
    await waitForAnalysis(db.pool);
    await until(async () => (await analysisTotals(db.pool)).inOrderBatchRings >= stored);
    const h = await holders();
    expect([...(h.get('so-a') ?? []), ...(h.get('so-b') ?? [])].sort()).toEqual(UNITS.map((u) => u.config.id));
    await checkExactlyOnce();
  }, 90_000);

  it('a third worker joins and the shares even out; one killed with -9 has its units taken over', async () => {
    start('so-c');
    await until(async () => {
      const h = await holders();
      return ['so-a', 'so-b', 'so-c'].every((w) => h.get(w)?.length === 2);
    });
    const victimUnits = (await holders()).get('so-b') as string[];
    await writeDays('2026-08-03T00:00:00Z', '2026-08-05T00:00:00Z', 60);
    await until(async () => {
      const { rows } = await db.pool.query(`SELECT count(*)::int AS n FROM analysis_batches WHERE worker_id = 'so-b' AND from_ts >= '2026-08-03'`);
      return rows[0].n > 0;
    }, 20);
    await procs.get('so-b')!.kill();
    await waitForAnalysis(db.pool);
    await until(async () => (await analysisTotals(db.pool)).inOrderBatchRings >= stored);
    await until(async () => {
      const h = await holders();
      return !h.has('so-b') && (h.get('so-a')?.length ?? 0) + (h.get('so-c')?.length ?? 0) === 6;
    });
    const h = await holders();
    for (const u of victimUnits) expect([...(h.get('so-a') ?? []), ...(h.get('so-c') ?? [])]).toContain(u);
    await checkExactlyOnce();
    // The victim's units were analysed by it, then by a survivor, never by it again.
    const { rows } = await db.pool.query(
      `SELECT unit_id, string_agg(worker_id, ',' ORDER BY from_ts) AS seq FROM analysis_batches WHERE kind = 'in_order' AND unit_id = ANY($1) GROUP BY unit_id`,
      [victimUnits],
    );
    for (const r of rows) expect(r.seq).not.toMatch(/so-b,(so-a|so-c).*so-b/);
  }, 90_000);
});
