/**
 * Kill -9 of a worker process in the middle of a backlog, then another worker: every ring is
 * analysed exactly once (counts of analysis rows, of in-order batch rings and of the progress
 * counters all equal the stored rings; no two batches of a unit overlap), the first worker's
 * batches all come before the second's, and the alerts and every alert change are the same
 * as those of an uninterrupted run over the same rings (no duplicate, none lost).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { createLogger } from '../../services/db/logger.ts';
import { analysisTotals } from '../../services/db/progress.ts';
import { startWorker } from '../../services/worker/index.ts';
import { demoFleet, type SimUnit } from '../../services/sim/index.ts';
import type { Pool } from '../../services/db/pool.ts';
import { expectEveryRingAnalysedOnce, healthyUnit, registerUnit, simulate, testConfig, until, waitForAnalysis, writeRings, alertChanges } from './fixtures.ts';
import { startWorkerProcess, type WorkerProcess } from './processes.ts';

const FROM = '2026-07-01T00:00:00Z';
const TO = '2026-07-07T00:00:00Z';
const base = demoFleet()[0];
const faulty: SimUnit = {
  ...base,
  config: { ...base.config, id: 'crash-f' },
  faults: [
    { kind: 'flame_loss', chamber: 3, at: '2026-07-02T10:00:00Z', durationH: 3 },
    { kind: 'tc_open', thermocouple: 7, at: '2026-07-04T06:00:00Z', until: '2026-07-05T06:00:00Z', readsC: -20 },
  ],
};
const healthy = healthyUnit('crash-h');
const batches = [simulate(faulty, FROM, TO, 3), simulate(healthy, FROM, TO, 4)];
const total = batches.reduce((s, b) => s + b.count, 0);
const PROCESS_ENV = { CANSIGHT_WORKER_BATCH_RINGS: '200', CANSIGHT_WORKER_CONCURRENCY: '1' };

let crashed: TestDatabase;
let reference: TestDatabase;
const procs: WorkerProcess[] = [];
let analysedAtKill = 0;
let consistentAtKill: Awaited<ReturnType<typeof analysisTotals>> | null = null;

async function load(pool: Pool) {
  await registerUnit(pool, faulty);
  await registerUnit(pool, healthy);
  for (const b of batches) await writeRings(pool, b);
}

beforeAll(async () => {
  crashed = await createTestDatabase();
  reference = await createTestDatabase();
  await load(crashed.pool);
  await load(reference.pool);

  // The uninterrupted run, in this process, with other batch sizes.
  const config = testConfig({ CANSIGHT_WORKER_BATCH_RINGS: '1500' });
  const w = await startWorker({ pool: reference.pool, logger: createLogger(config.logLevel), config, workerId: 'reference' });
  await waitForAnalysis(reference.pool);
  await w.stop();

  // The crashed run: worker A is killed mid-backlog, worker B finishes.
  const a = startWorkerProcess(crashed.url, 'crash-a', PROCESS_ENV);
  procs.push(a);
  await until(async () => {
    const { rows } = await crashed.pool.query(`SELECT count(*)::int AS n FROM analysis_batches WHERE kind = 'in_order'`);
    if (a.child.exitCode !== null) throw new Error(`worker A exited early: ${a.stderr()}`);
    return rows[0].n >= 8;
  }, 20);
  await a.kill();
  consistentAtKill = await analysisTotals(crashed.pool);
  analysedAtKill = consistentAtKill.analysed;
  const b = startWorkerProcess(crashed.url, 'crash-b', PROCESS_ENV);
  procs.push(b);
  await waitForAnalysis(crashed.pool);
  await until(async () => (await analysisTotals(crashed.pool)).inOrderBatchRings >= total);
}, 170_000);

afterAll(async () => {
  for (const p of procs) await p.kill();
  await crashed?.drop();
  await reference?.drop();
});

describe('a worker killed in the middle of a backlog', () => {
  it('was killed with part of the backlog analysed, and what it had committed was whole', () => {
    expect(analysedAtKill).toBeGreaterThan(0);
    expect(analysedAtKill).toBeLessThan(total);
    expect(consistentAtKill!.inOrderBatchRings).toBe(analysedAtKill);
    expect(consistentAtKill!.inOrderProgress).toBe(analysedAtKill);
  });

  it('every ring is analysed exactly once after another worker takes over', async () => {
    const rows = await expectEveryRingAnalysedOnce(crashed.pool, total);
    // Per unit: A's batches, then B's; never A again after B.
    for (const unit of ['crash-f', 'crash-h']) {
      const seq = rows.filter((r) => r.unit_id === unit).map((r) => r.worker_id).join(',');
      expect(seq).toMatch(/^(crash-a,)*(crash-a|crash-b)(,crash-b)*$/);
    }
    expect(new Set(rows.map((r) => r.worker_id))).toEqual(new Set(['crash-a', 'crash-b']));
    const claims = await crashed.pool.query(`SELECT DISTINCT worker_id FROM unit_claims`);
    expect(claims.rows.map((r) => r.worker_id)).toEqual(['crash-b']);
  });

  it('raises the same alerts with the same changes as an uninterrupted run: none duplicated, none lost', async () => {
    const expected = await alertChanges(reference.pool);
    expect(expected.length).toBeGreaterThan(0);
    expect(expected.some((c) => c.includes('chamber_cold'))).toBe(true);
    const got = await alertChanges(crashed.pool);
    expect(got).toEqual(expected);
    const { rows } = await crashed.pool.query(
      `SELECT unit_id, condition_key, count(*)::int AS n FROM alerts WHERE closed_at IS NULL GROUP BY 1, 2 HAVING count(*) > 1`,
    );
    expect(rows).toEqual([]);
  });
});
