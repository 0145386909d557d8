/**
 * A worker process killed outright (kill -9) on this host: the next worker of the same host
 * sees that its process is gone and takes its units at once, instead of waiting out its leases
 * (here 60 s). A worker that is still running keeps its units until its lease says otherwise.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { createLogger } from '../../services/db/logger.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { healthyUnit, registerUnit, testConfig, until } from './fixtures.ts';
import { startWorkerProcess, type WorkerProcess } from './processes.ts';

const LONG_LEASE = { CANSIGHT_WORKER_LEASE_S: '60', CANSIGHT_WORKER_CLAIM_EVERY_S: '1' };
let db: TestDatabase;
const procs: WorkerProcess[] = [];
let w: Worker | undefined;

const holders = async () => (await db.pool.query(`SELECT worker_id, count(*)::int AS n FROM unit_claims GROUP BY worker_id ORDER BY worker_id`)).rows.map((r) => `${r.worker_id}:${r.n}`);

beforeAll(async () => {
  db = await createTestDatabase();
  for (const id of ['rs-1', 'rs-2', 'rs-3']) await registerUnit(db.pool, healthyUnit(id));
}, 60_000);
afterAll(async () => {
  await w?.stop();
  for (const p of procs) await p.kill();
  await db?.drop();
});

describe('a worker killed outright', () => {
  it('leaves its units to the next worker of the same host at once, not after its 60 s leases', async () => {
    const a = startWorkerProcess(db.url, 'restart-a', LONG_LEASE);
    procs.push(a);
    await until(async () => {
      if (a.child.exitCode !== null) throw new Error(`worker A exited early: ${a.stderr()}`);
      return (await holders()).join() === 'restart-a:3';
    });
    await a.kill();
    const config = testConfig(LONG_LEASE);
    const started = Date.now();
    w = await startWorker({ pool: db.pool, logger: createLogger(config.logLevel), config, workerId: 'restart-b' });
    await until(async () => (await holders()).join() === 'restart-b:3' || Date.now() - started > 20_000);
    expect(await holders()).toEqual(['restart-b:3']);
    expect(Date.now() - started).toBeLessThan(15_000);
    const { rows } = await db.pool.query(`SELECT worker_id FROM workers ORDER BY worker_id`);
    expect(rows.map((r) => r.worker_id)).toEqual(['restart-b']);
  }, 90_000);
});
