/**
 * `cansight import --wait`: after the upload it waits until the analysis of the units it
 * imported has caught up with their rings, showing how far it has come; with no worker taking
 * those units it gives up after a while with a message that says what to start.
 */
import { writeFile } from 'node:fs/promises';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { loadConfig } from '../../services/db/config.ts';
import { createLogger } from '../../services/db/logger.ts';
import { analysisProgress } from '../../services/db/progress.ts';
import { startWorker } from '../../services/worker/index.ts';
import type { TestDatabase } from '../helpers/db.ts';
import { importSetup, ndjson, ring } from './fixtures.ts';

const config = loadConfig({ LOG_LEVEL: 'silent', CANSIGHT_WORKER_LEASE_S: '4', CANSIGHT_WORKER_CLAIM_EVERY_S: '1' });
const logger = createLogger('silent');
let setup: Awaited<ReturnType<typeof importSetup>>;
let db: TestDatabase;
let dir: string;

beforeAll(async () => {
  setup = await importSetup('cansight-import-wait-', ['wait-1', 'wait-2', 'wait-3'], config);
  ({ db, dir } = setup);
});
afterAll(async () => setup?.close());

const run = (args: string[], waitStallMs?: number) => setup.run(args, { waitStallMs });

describe('cansight import --wait', () => {
  it('returns once every imported unit is analysed up to its last ring, saying how far it came', async () => {
    const file = path.join(dir, 'two.ndjson');
    await writeFile(file, ndjson([...Array.from({ length: 300 }, (_, i) => ({ unitId: 'wait-1', ...ring(i) })), ...Array.from({ length: 200 }, (_, i) => ({ unitId: 'wait-2', ...ring(i) }))]));
    const worker = await startWorker({ pool: db.pool, logger, config, workerId: 'w-import-wait' });
    try {
      const r = await run([file, '--wait']);
      expect(r.code, r.err).toBe(0);
      expect(r.out).toContain('analysis caught up: wait-1, wait-2');
      expect(r.err).toMatch(/analysis: 500 of 500 rings, 2 of 2 units caught up, every unit analysed up to 2026-01-15T00:0[0-9]:\d\d\.000Z/);
      for (const u of ['wait-1', 'wait-2']) {
        const p = await analysisProgress(db.pool, u);
        expect(p.ringsAnalysed).toBe(p.ringsStored);
      }
    } finally {
      await worker.stop();
    }
  }, 120_000);

  it('gives up, naming the worker it needs, when nothing analyses the rings', async () => {
    const file = path.join(dir, 'alone.ndjson');
    await writeFile(file, ndjson(Array.from({ length: 50 }, (_, i) => ({ unitId: 'wait-3', ...ring(i) }))));
    const r = await run([file, '--wait'], 1500);
    expect(r.code).toBe(1);
    expect(r.out[0]).toBe('alone.ndjson: accepted 50, duplicates 0, rejected 0');
    expect(r.err).toMatch(/made no progress for 2 s \(50 rings left\); is a worker running on this database/);
  }, 60_000);
});
