/**
 * The nightly drift job is only a safety net, and it follows ring time. A healthy unit's rings
 * from 1 June 00:00 to 7 June 15:00 (the data stop mid-afternoon) are analysed by a running
 * worker, which updates drift as each ring-time day ends; the last day, never ended by a later
 * ring, is left. The nightly job then:
 *  - run on the evening of 7 June (the unit's last day still under way on the clock): leaves it;
 *  - run while the unit's rings are being judged again: leaves it;
 *  - run the next night, or months later: brings the unit's drift to the end of 7 June, its own
 *    last ring day, and the same either way (the wall clock's date plays no part).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createLogger } from '../../services/db/logger.ts';
import { loadConfig } from '../../services/db/config.ts';
import { readDriftStates } from '../../services/db/drift.ts';
import { startWorker } from '../../services/worker/index.ts';
import { runNightlyDrift } from '../../services/worker/drift.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { healthyUnit, registerUnit, simulate, testConfig, until, writeRings } from './fixtures.ts';

const rings = simulate(healthyUnit('nightly-1'), '2026-06-01T00:00:00Z', '2026-06-07T15:00:00Z', 3);
const config = testConfig({ CANSIGHT_BASELINE_AUTO_DAYS: '2', CANSIGHT_WORKER_BATCH_RINGS: '5000' });
const logger = createLogger(config.logLevel);
let db: TestDatabase;
const lastDays = async () => [...new Set((await readDriftStates(db.pool, 'nightly-1')).map((s) => s.lastDay))];

beforeAll(async () => {
  db = await createTestDatabase();
  await registerUnit(db.pool, healthyUnit('nightly-1'));
  await writeRings(db.pool, rings);
  const worker = await startWorker({ pool: db.pool, logger, config, workerId: 'w-nightly' });
  const last = rings.tsMs[rings.count - 1];
  await until(async () => {
    const { rows } = await db.pool.query(`SELECT watermark_ts FROM analysis_progress WHERE unit_id = 'nightly-1'`);
    return rows[0]?.watermark_ts?.getTime() === last;
  });
  await worker.stop();
}, 300_000);

afterAll(async () => {
  await db?.drop();
});

describe('the nightly drift job', () => {
  it('finds drift brought up to the last day that a later ring ended (6 June)', async () => {
    expect(await lastDays()).toEqual(['2026-06-06']);
  });

  it('leaves a unit whose last ring day has not yet ended on the clock', async () => {
    const r = await runNightlyDrift({ pool: db.pool, logger, config }, ['nightly-1'], Date.parse('2026-06-07T22:00:00Z'));
    expect(r).toEqual([]);
    expect(await lastDays()).toEqual(['2026-06-06']);
  });

  it('leaves a unit whose rings are being judged again', async () => {
    await db.pool.query(`UPDATE analysis_progress SET reanalyse_from = '2026-06-03T00:00:00Z' WHERE unit_id = 'nightly-1'`);
    try {
      const r = await runNightlyDrift({ pool: db.pool, logger, config }, ['nightly-1'], Date.parse('2026-06-08T02:17:00Z'));
      expect(r).toEqual([]);
      expect(await lastDays()).toEqual(['2026-06-06']);
    } finally {
      await db.pool.query(`UPDATE analysis_progress SET reanalyse_from = NULL WHERE unit_id = 'nightly-1'`);
    }
  });

  it('brings drift to the end of the unit\'s own last ring day, the same the next night as months later', async () => {
    const next = await runNightlyDrift({ pool: db.pool, logger, config }, ['nightly-1'], Date.parse('2026-06-08T02:17:00Z'));
    expect(next).toHaveLength(1);
    expect(next[0].baselineVersion).not.toBeNull();
    const after = await readDriftStates(db.pool, 'nightly-1');
    expect([...new Set(after.map((s) => s.lastDay))]).toEqual(['2026-06-07']);
    await runNightlyDrift({ pool: db.pool, logger, config }, ['nightly-1'], Date.parse('2026-12-04T02:17:00Z'));
    const later = await readDriftStates(db.pool, 'nightly-1');
    const strip = (xs: typeof after) => xs.map(({ updatedAt: _u, ...rest }) => rest);
    expect(strip(later)).toEqual(strip(after));
  });
});

describe('the nightly drift job\'s schedule', () => {
  it('is 02:17 UTC by default, can be turned off, and a bad pattern is refused by name', () => {
    expect(loadConfig({}).worker.driftCron).toBe('17 2 * * *');
    expect(loadConfig({ CANSIGHT_DRIFT_CRON: 'off' }).worker.driftCron).toBeNull();
    expect(() => loadConfig({ CANSIGHT_DRIFT_CRON: 'nightly' })).toThrow(/CANSIGHT_DRIFT_CRON/);
  });
});
