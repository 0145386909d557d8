/**
 * Starts in history that arrives after later rings. A week of a peaking unit (daily starts, one
 * with a chamber lighting late and one with a chamber that never lights, from the simulator's
 * `starts` scenario) is sent to two units with the same rings through a running worker:
 *  - in order: the whole week at once;
 *  - out of order: the second half of the week first, analysed, then the first half (thousands
 *    of rings older than the ones analysed, so the unit is judged again from the first of them).
 *  - a start held back: the whole week except the rings of its second start (from cranking to
 *    loaded, fewer rings than make a late batch of history), which follow once the rest is
 *    analysed, as a gateway that resends a lost stretch would.
 * All must end with the same starts (the simulator's ground truth: every start, with its
 * outcome) and the same start alerts (chamber_unlit, start_failed: kind, chamber, grade).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createLogger } from '../../services/db/logger.ts';
import { buildScenario } from '../../services/sim/scenarios.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import type { RingBatch } from '../../services/sim/types.ts';
import type { Pool } from '../../services/db/pool.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { pick, registerUnit, testConfig, until, writeRings } from '../worker/fixtures.ts';

const scenario = buildScenario('starts', { days: 7 });
const unitOf = (id: string) => ({ ...scenario.units[0], config: { ...scenario.units[0].config, id } });
const sim = simulateUnit(unitOf('order-in'), { from: scenario.from, to: scenario.to, seed: 21 });
const batch = sim.batch();
const as = (b: RingBatch, unitId: string): RingBatch => ({ ...b, unitId });

// A late batch of history is 5,000 rings here: more than the held start, fewer than half the week.
const ENV = { CANSIGHT_WORKER_BATCH_RINGS: '5000', CANSIGHT_LATE_REWIND_RINGS: '5000' };
const heldStart = sim.truth.starts[1];
let heldRings = 0;
let db: TestDatabase;
let worker: Worker;

async function settled(pool: Pool, unitId: string, uptoMs: number): Promise<boolean> {
  const { rows } = await pool.query(`SELECT watermark_ts, reanalyse_from, reanalysis_to FROM analysis_progress WHERE unit_id = $1`, [unitId]);
  const p = rows[0] as { watermark_ts: Date | null; reanalyse_from: Date | null; reanalysis_to: Date | null } | undefined;
  return !!p && !!p.watermark_ts && p.watermark_ts.getTime() >= uptoMs && p.reanalyse_from === null && p.reanalysis_to === null;
}

beforeAll(async () => {
  db = await createTestDatabase();
  await registerUnit(db.pool, unitOf('order-in'));
  await registerUnit(db.pool, unitOf('order-late'));
  await registerUnit(db.pool, unitOf('order-gap'));
  const config = testConfig(ENV);
  worker = await startWorker({ pool: db.pool, logger: createLogger(config.logLevel), config, workerId: 'w-order' });
  const last = batch.tsMs[batch.count - 1];
  await writeRings(db.pool, as(batch, 'order-in'));
  // The later half first, analysed; then the earlier half.
  const late = as(batch, 'order-late');
  const mid = Math.floor(batch.count / 2);
  await writeRings(db.pool, late, mid, batch.count);
  await until(() => settled(db.pool, 'order-late', last), 100);
  await writeRings(db.pool, late, 0, mid);
  await until(async () => {
    const { rows } = await db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE unit_id = 'order-late'`);
    return rows[0].n === batch.count && (await settled(db.pool, 'order-late', last));
  }, 100);
  await until(() => settled(db.pool, 'order-in', last), 100);
  // The second start's rings, resent after the rest.
  const gap = as(batch, 'order-gap');
  const held = (i: number) => batch.tsMs[i] >= Date.parse(heldStart.crankAt) && batch.tsMs[i] <= Date.parse(heldStart.loadedAt as string);
  const kept = pick(gap, (i) => !held(i));
  heldRings = batch.count - kept.count;
  await writeRings(db.pool, kept);
  await until(() => settled(db.pool, 'order-gap', last), 100);
  await writeRings(db.pool, pick(gap, held));
  await until(async () => {
    const { rows } = await db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE unit_id = 'order-gap'`);
    return rows[0].n === batch.count && (await settled(db.pool, 'order-gap', last));
  }, 100);
}, 600_000);

afterAll(async () => {
  await worker?.stop();
  await db?.drop();
});

async function startsOf(unitId: string) {
  const { rows } = await db.pool.query(`SELECT crank_at, outcome FROM starts WHERE unit_id = $1 ORDER BY crank_at`, [unitId]);
  return rows.map((r: { crank_at: Date; outcome: string }) => `${r.crank_at.toISOString()} ${r.outcome}`);
}

async function startAlertsOf(unitId: string) {
  const { rows } = await db.pool.query(
    `SELECT kind, chamber, grade FROM alerts WHERE unit_id = $1 AND kind IN ('chamber_unlit', 'start_failed') ORDER BY raised_at, kind, chamber`,
    [unitId],
  );
  return rows.map((r: { kind: string; chamber: number | null; grade: string }) => `${r.kind}:${r.chamber}:${r.grade}`);
}

describe('starts in history that arrives after later rings', () => {
  it('are all found, with the outcomes of the ground truth, as when the rings came in order', async () => {
    const inOrder = await startsOf('order-in');
    expect(inOrder.length).toBe(sim.truth.starts.length);
    expect(sim.truth.starts.length).toBeGreaterThanOrEqual(6);
    expect(await startsOf('order-late')).toEqual(inOrder);
  });

  it('are found when a start alone arrives late, in fewer rings than a late batch of history', async () => {
    expect(heldStart.loadedAt).toBeTruthy();
    expect(heldRings).toBeGreaterThan(100);
    expect(heldRings).toBeLessThan(testConfig(ENV).worker.lateRewindRings);
    const inOrder = await startsOf('order-in');
    expect(inOrder.some((s) => s.startsWith(new Date(Date.parse(heldStart.crankAt)).toISOString().slice(0, 16)))).toBe(true);
    expect(await startsOf('order-gap')).toEqual(inOrder);
    expect(await startAlertsOf('order-gap')).toEqual(await startAlertsOf('order-in'));
  });

  it('raise the same start alerts', async () => {
    const inOrder = await startAlertsOf('order-in');
    expect(inOrder.some((a) => a.startsWith('chamber_unlit'))).toBe(true);
    expect(await startAlertsOf('order-late')).toEqual(inOrder);
  });
});
