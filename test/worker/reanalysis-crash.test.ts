/**
 * Kill -9 of a worker process in the middle of a re-analysis. Ten days of a unit with a lost
 * flame and an open thermocouple after the first days are analysed; then a baseline is requested
 * over the first three days, so the rings after them are judged again. Worker A is killed with
 * SIGKILL while it is judging them again (some days done, some left); worker B finishes. Compared
 * with an uninterrupted run over the same rings and request: every ring after the window judged
 * by the requested baseline, every ring analysed once (re-run batches are logged as such, the
 * in-order counters unchanged), the same alert changes, no duplicate alert, none lost.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { createLogger } from '../../services/db/logger.ts';
import { analysisTotals } from '../../services/db/progress.ts';
import { insertBaselineRequest } from '../../services/db/baselines.ts';
import { startWorker } from '../../services/worker/index.ts';
import { demoFleet, type SimUnit } from '../../services/sim/index.ts';
import type { Pool } from '../../services/db/pool.ts';
import { registerUnit, simulate, testConfig, until, writeRings, alertChanges } from './fixtures.ts';
import { startWorkerProcess, type WorkerProcess } from './processes.ts';

const FROM = '2026-07-01T00:00:00Z';
const TO = '2026-07-11T00:00:00Z';
const WINDOW = { from: Date.parse(FROM), to: Date.parse('2026-07-04T00:00:00Z') };
const base = demoFleet()[0];
const unit: SimUnit = {
  ...base,
  config: { ...base.config, id: 'rerun-1' },
  faults: [
    { kind: 'flame_loss', chamber: 3, at: '2026-07-06T10:00:00Z', durationH: 3 },
    { kind: 'tc_open', thermocouple: 7, at: '2026-07-08T06:00:00Z', until: '2026-07-09T06:00:00Z', readsC: -20 },
  ],
};
const rings = simulate(unit, FROM, TO, 5);
const ENV = { CANSIGHT_BASELINE_AUTO_DAYS: '2', CANSIGHT_ALERT_OFF_DELAY_S: '3600' };
const PROCESS_ENV = { ...ENV, CANSIGHT_WORKER_BATCH_RINGS: '200', CANSIGHT_WORKER_CONCURRENCY: '1' };

let crashed: TestDatabase;
let reference: TestDatabase;
const procs: WorkerProcess[] = [];
let atKill: { watermark: number; to: number; from: number } | null = null;

async function progress(pool: Pool) {
  const { rows } = await pool.query(`SELECT watermark_ts, reanalyse_from, reanalysis_to, reanalysis_from FROM analysis_progress WHERE unit_id = 'rerun-1'`);
  return rows[0] as { watermark_ts: Date | null; reanalyse_from: Date | null; reanalysis_to: Date | null; reanalysis_from: Date | null } | undefined;
}

const last = rings.tsMs[rings.count - 1];
async function settled(pool: Pool): Promise<boolean> {
  const p = await progress(pool);
  const { rows } = await pool.query(`SELECT state FROM baseline_requests WHERE unit_id = 'rerun-1'`);
  return !!p && p.watermark_ts?.getTime() === last && p.reanalyse_from === null && p.reanalysis_to === null && rows.length === 1 && rows[0].state === 'fitted';
}

async function analysedOnce(pool: Pool): Promise<boolean> {
  const t = await analysisTotals(pool);
  return t.stored > 0 && t.analysed === t.stored && t.inOrderBatchRings === t.stored;
}

beforeAll(async () => {
  crashed = await createTestDatabase();
  reference = await createTestDatabase();
  for (const db of [crashed, reference]) {
    await registerUnit(db.pool, unit);
    await writeRings(db.pool, rings);
  }

  // The uninterrupted run, in this process.
  const config = testConfig({ ...ENV, CANSIGHT_WORKER_BATCH_RINGS: '5000' });
  const w = await startWorker({ pool: reference.pool, logger: createLogger(config.logLevel), config, workerId: 'reference' });
  await until(() => analysedOnce(reference.pool));
  await insertBaselineRequest(reference.pool, 'rerun-1', WINDOW.from, WINDOW.to, 'test');
  await until(() => settled(reference.pool), 100);
  await w.stop();

  // The crashed run: A analyses, is asked to judge again, and is killed part way through.
  const a = startWorkerProcess(crashed.url, 'rerun-a', PROCESS_ENV);
  procs.push(a);
  await until(() => analysedOnce(crashed.pool), 100);
  await insertBaselineRequest(crashed.pool, 'rerun-1', WINDOW.from, WINDOW.to, 'test');
  await until(async () => {
    if (a.child.exitCode !== null) throw new Error(`worker A exited early: ${a.stderr()}`);
    const p = await progress(crashed.pool);
    // Part way: the rewind done and at least a day judged again, but not all of it.
    return !!p?.reanalysis_to && !!p.watermark_ts && !!p.reanalysis_from && p.watermark_ts.getTime() > p.reanalysis_from.getTime() + 86_400_000 && p.watermark_ts < p.reanalysis_to;
  }, 10);
  await a.kill();
  const p = (await progress(crashed.pool))!;
  atKill = { watermark: p.watermark_ts!.getTime(), to: p.reanalysis_to!.getTime(), from: p.reanalysis_from!.getTime() };
  const b = startWorkerProcess(crashed.url, 'rerun-b', PROCESS_ENV);
  procs.push(b);
  await until(() => settled(crashed.pool), 100);
}, 300_000);

afterAll(async () => {
  for (const p of procs) await p.kill();
  await crashed?.drop();
  await reference?.drop();
});

describe('a worker killed in the middle of a re-analysis', () => {
  it('was killed part way through judging the rings again, after the window', () => {
    expect(atKill).not.toBeNull();
    expect(atKill!.from).toBe(WINDOW.to);
    expect(atKill!.watermark).toBeLessThan(atKill!.to);
  });

  it('leaves every ring after the window judged by the requested baseline, and every ring analysed once', async () => {
    const { rows } = await crashed.pool.query(
      `SELECT count(*) FILTER (WHERE a.baseline_version IS DISTINCT FROM q.version)::int AS other, count(*)::int AS n
         FROM ring_analysis a JOIN baseline_requests q ON q.unit_id = a.unit_id WHERE a.unit_id = 'rerun-1' AND a.ts >= q.window_to`,
    );
    expect(rows[0].n).toBeGreaterThan(1000);
    expect(rows[0].other).toBe(0);
    const t = await analysisTotals(crashed.pool);
    expect(t.analysed).toBe(rings.count);
    expect(t.inOrderBatchRings).toBe(rings.count);
    expect(t.inOrderProgress).toBe(rings.count);
    const rerun = await crashed.pool.query(`SELECT coalesce(sum(rings), 0)::int AS n, count(DISTINCT worker_id)::int AS workers FROM analysis_batches WHERE kind = 'rerun'`);
    expect(rerun.rows[0].n).toBeGreaterThan(0);
    expect(rerun.rows[0].workers).toBe(2);
  });

  it('has the same alert changes as an uninterrupted run: none duplicated, none lost', async () => {
    const expected = await alertChanges(reference.pool);
    expect(expected.some((c) => c.startsWith('rerun-1 chamber_cold')), expected.join('\n')).toBe(true);
    expect(expected.some((c) => c.startsWith('rerun-1 thermocouple_fault'))).toBe(true);
    expect(await alertChanges(crashed.pool)).toEqual(expected);
    const { rows } = await crashed.pool.query(`SELECT condition_key, count(*)::int AS n FROM alerts WHERE closed_at IS NULL GROUP BY 1 HAVING count(*) > 1`);
    expect(rows).toEqual([]);
  });
});
