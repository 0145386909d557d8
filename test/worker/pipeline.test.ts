/**
 * The analysis pipeline on a real PostgreSQL: every ring analysed once, in order, with its
 * batch logged; rollups equal to a recompute from the stored analysis; a re-run of a span
 * changes nothing; late rings are found, analysed, and their hours and days corrected.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { createLogger } from '../../services/db/logger.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { analysisTotals } from '../../services/db/progress.ts';
import { readRollups, type RollupRow } from '../../services/db/rollups.ts';
import { reanalyseSpan, type PipelineContext } from '../../services/worker/pipeline.ts';
import { defaultThresholds } from '../../services/core/findings.ts';
import { deadbandThresholds, loadAlertSettings } from '../../services/worker/alerts.ts';
import { healthyUnit, pick, registerUnit, simulate, testConfig, until, waitForAnalysis, writeRings } from './fixtures.ts';

let db: TestDatabase;
let worker: Worker;
const config = testConfig();
const logger = createLogger(config.logLevel);
const FROM = '2026-06-01T00:00:00Z';
const TO = '2026-06-04T00:00:00Z';
const unit = healthyUnit('pipe-1');
const all = simulate(unit, FROM, TO);
// Every 50th ring is held back and sent after the rest: late rings.
const onTime = pick(all, (i) => i % 50 !== 25);
const lateOnes = pick(all, (i) => i % 50 === 25);

beforeAll(async () => {
  db = await createTestDatabase();
  await registerUnit(db.pool, unit);
  await writeRings(db.pool, onTime, 0, Math.floor(onTime.count / 2));
  worker = await startWorker({ pool: db.pool, logger, config, workerId: 'w-pipe' });
  await writeRings(db.pool, onTime, Math.floor(onTime.count / 2), onTime.count);
  await waitForAnalysis(db.pool);
});

afterAll(async () => {
  await worker?.stop();
  await db?.drop();
});

function pipelineContext(): PipelineContext {
  const alertSettings = loadAlertSettings(config);
  return { pool: db.pool, logger, config, workerId: null, alertSettings, raise: defaultThresholds, hold: deadbandThresholds(defaultThresholds, alertSettings), memory: new Map() };
}

async function snapshot() {
  const analysis = await db.pool.query(`SELECT * FROM ring_analysis ORDER BY unit_id, ts`);
  const rollups = await db.pool.query(`SELECT unit_id, period, metric, bucket, n, sum, sumsq, min, max FROM analysis_rollups ORDER BY 1, 2, 3, 4`);
  return {
    analysis: analysis.rows.map(({ analysed_at: _a, ...r }) => r),
    rollups: rollups.rows,
  };
}

function closeRollups(a: Record<string, unknown>[], b: Record<string, unknown>[]) {
  expect(a.length).toBe(b.length);
  for (let i = 0; i < a.length; i++) {
    expect(a[i].n).toEqual(b[i].n);
    expect(a[i].min).toEqual(b[i].min);
    expect(a[i].max).toEqual(b[i].max);
    const sa = a[i].sum as number[];
    const sb = b[i].sum as number[];
    for (let k = 0; k < sa.length; k++) expect(sa[k]).toBeCloseTo(sb[k], 3);
  }
}

describe('analysis pipeline', () => {
  it('analyses every stored ring exactly once, in non-overlapping in-order batches', async () => {
    const t = await analysisTotals(db.pool);
    expect(t.stored).toBe(onTime.count);
    expect(t.analysed).toBe(onTime.count);
    expect(t.inOrderBatchRings).toBe(onTime.count);
    expect(t.inOrderProgress).toBe(onTime.count);
    const { rows } = await db.pool.query(`SELECT from_ts, to_ts FROM analysis_batches WHERE kind = 'in_order' ORDER BY from_ts`);
    for (let i = 1; i < rows.length; i++) expect(rows[i].from_ts.getTime()).toBeGreaterThan(rows[i - 1].to_ts.getTime());
  });

  it('keeps hourly and daily rollups whose counts add up to the analysed rings', async () => {
    const hours = await readRollups(db.pool, unit.config.id, 'hour', Date.parse(FROM), Date.parse(TO), 'ring_mean');
    const days = await readRollups(db.pool, unit.config.id, 'day', Date.parse(FROM), Date.parse(TO), 'ring_mean');
    const total = (rows: RollupRow[]) => rows.reduce((s, r) => s + r.n[0], 0);
    const { rows } = await db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE ring_mean IS NOT NULL`);
    expect(total(hours)).toBe(rows[0].n);
    expect(total(days)).toBe(rows[0].n);
    expect(days.length).toBe(3);
    const tc = await readRollups(db.pool, unit.config.id, 'day', Date.parse(FROM), Date.parse(TO), 'tc_deviation');
    expect(tc[0].n.length).toBe(unit.config.thermocouples.count);
    const ch = await readRollups(db.pool, unit.config.id, 'day', Date.parse(FROM), Date.parse(TO), 'chamber_deviation');
    expect(ch[0].n.length).toBe(unit.config.chambers.count);
  });

  it('re-running a span changes neither the analysis nor the rollups', async () => {
    await worker.stop();
    const before = await snapshot();
    const pc = pipelineContext();
    const n = await reanalyseSpan(pc, unit.config.id, Date.parse('2026-06-01T10:00:00Z'), Date.parse('2026-06-02T14:00:00Z'), 'rerun');
    expect(n).toBeGreaterThan(1000);
    const after = await snapshot();
    expect(after.analysis).toEqual(before.analysis);
    closeRollups(after.rollups, before.rollups);
    worker = await startWorker({ pool: db.pool, logger, config, workerId: 'w-pipe-2' });
  });

  it('finds late rings, analyses them, and corrects the rollups of their hours and days', async () => {
    await writeRings(db.pool, lateOnes);
    await worker.sweep();
    await waitForAnalysis(db.pool);
    await until(async () => (await analysisTotals(db.pool)).lateBatchRings > 0);
    const t = await analysisTotals(db.pool);
    expect(t.stored).toBe(all.count);
    expect(t.analysed).toBe(all.count);
    const { rows } = await db.pool.query(`SELECT late_rings_analysed::int AS n FROM analysis_progress WHERE unit_id = $1`, [unit.config.id]);
    expect(rows[0].n).toBe(lateOnes.count);
    const hours = await readRollups(db.pool, unit.config.id, 'hour', Date.parse(FROM), Date.parse(TO), 'ring_mean');
    const days = await readRollups(db.pool, unit.config.id, 'day', Date.parse(FROM), Date.parse(TO), 'ring_mean');
    const { rows: c } = await db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE ring_mean IS NOT NULL`);
    expect(hours.reduce((s, r) => s + r.n[0], 0)).toBe(c[0].n);
    expect(days.reduce((s, r) => s + r.n[0], 0)).toBe(c[0].n);
    // The stored rollups equal a recompute of every bucket from the analysis.
    await worker.stop();
    const before = await snapshot();
    await reanalyseSpan(pipelineContext(), unit.config.id, Date.parse(FROM), Date.parse(TO), 'rerun');
    const after = await snapshot();
    closeRollups(after.rollups, before.rollups);
    expect(after.analysis).toEqual(before.analysis);
    worker = await startWorker({ pool: db.pool, logger, config, workerId: 'w-pipe-3' });
  });
});
