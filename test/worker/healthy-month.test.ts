/**
 * A healthy simulated unit (the demo fleet's base-load unit, no faults) analysed over a month
 * of history: its first baseline is fitted automatically after the configured days of steady
 * data, the nightly drift runs part way, and no alert of grade alarm or critical is raised
 * (a healthy fleet stays well inside the operator alarm-rate benchmarks of EEMUA 191: about one
 * alarm per 10 minutes per operator is manageable, more than 10 in 10 minutes is a flood).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { createLogger } from '../../services/db/logger.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { listBaselines } from '../../services/db/baselines.ts';
import { readDriftStates } from '../../services/db/drift.ts';
import { healthyUnit, pick, registerUnit, simulate, testConfig, waitForAnalysis, writeRings } from './fixtures.ts';

let db: TestDatabase;
let worker: Worker;
const config = testConfig({ CANSIGHT_WORKER_BATCH_RINGS: '5000' });
const logger = createLogger(config.logLevel);
const FROM = '2026-06-01T00:00:00Z';
const MID = Date.parse('2026-06-21T00:00:00Z');
const TO = '2026-07-01T00:00:00Z';
const unit = healthyUnit('month-1');
const month = simulate(unit, FROM, TO, 21);

beforeAll(async () => {
  db = await createTestDatabase();
  await registerUnit(db.pool, unit);
  worker = await startWorker({ pool: db.pool, logger, config, workerId: 'w-month' });
  await writeRings(db.pool, pick(month, (i) => month.tsMs[i] < MID));
  await waitForAnalysis(db.pool);
  await worker.runDrift(MID);
  await writeRings(db.pool, pick(month, (i) => month.tsMs[i] >= MID));
  await waitForAnalysis(db.pool);
}, 170_000);

afterAll(async () => {
  await worker?.stop();
  await db?.drop();
});

describe('a healthy unit for a month', () => {
  it('analyses every ring and fits its first baseline after the configured days of steady data', async () => {
    const { rows } = await db.pool.query(`SELECT count(*)::int AS n, count(*) FILTER (WHERE baseline_version = 1)::int AS with_baseline FROM ring_analysis`);
    expect(rows[0].n).toBe(month.count);
    const baselines = await listBaselines(db.pool, unit.config.id);
    expect(baselines.map((b) => b.version)).toEqual([1]);
    expect(baselines[0].fittedBy).toBe('automatic');
    const days = (baselines[0].windowTo.getTime() - baselines[0].windowFrom.getTime()) / 86_400_000;
    expect(days).toBeGreaterThanOrEqual(config.worker.baselineAutoDays);
    // Rings analysed after the fit name the version they were compared with.
    expect(rows[0].with_baseline).toBeGreaterThan(month.count / 4);
  });

  it('keeps drift state for every chamber and thermocouple against that baseline', async () => {
    const states = await readDriftStates(db.pool, unit.config.id);
    expect(states.filter((s) => s.subject === 'chamber').length).toBe(unit.config.chambers.count);
    expect(states.filter((s) => s.subject === 'thermocouple').length).toBe(unit.config.thermocouples.count);
    for (const s of states) expect(s.baselineVersion).toBe(1);
  });

  it('names no worst chamber with a high likelihood, and none at all off steady load or before the baseline', async () => {
    const { rows } = await db.pool.query(
      `SELECT count(*) FILTER (WHERE steady AND baseline_version IS NOT NULL AND worst_chamber IS NOT NULL)::int AS named,
              percentile_cont(0.5) WITHIN GROUP (ORDER BY worst_likelihood) FILTER (WHERE worst_chamber IS NOT NULL)::float8 AS median,
              percentile_cont(0.99) WITHIN GROUP (ORDER BY worst_likelihood) FILTER (WHERE worst_chamber IS NOT NULL)::float8 AS p99,
              count(*) FILTER (WHERE worst_chamber IS NOT NULL AND (NOT steady OR baseline_version IS NULL))::int AS off
         FROM ring_analysis`,
    );
    // Before, every ring named the chamber whose raw estimate (its fingerprint and all) was
    // largest, split from its neighbours by the swirl uncertainty alone: 0.99 and more.
    expect(rows[0].named).toBeGreaterThan(month.count / 5);
    expect(rows[0].off).toBe(0);
    expect(rows[0].median).toBeLessThan(0.3);
    expect(rows[0].p99).toBeLessThan(0.6);
  });

  it('raises no alert of grade alarm or critical', async () => {
    const { rows } = await db.pool.query(`SELECT kind, grade, chamber, thermocouple, raised_at FROM alerts ORDER BY raised_at`);
    const severe = rows.filter((r) => r.grade === 'alarm' || r.grade === 'critical');
    expect(severe, JSON.stringify(severe.slice(0, 5))).toEqual([]);
    // Far below one alert per ten minutes of operation (EEMUA 191's manageable rate).
    expect(rows.length).toBeLessThan(30 * 24 * 6 * 0.01);
  });
});
