/**
 * Rollups held in memory while rings arrive live: a worker killed with -9 while it holds them
 * loses nothing. The stored rollups_to stays behind the watermark until the rollups are
 * written; the worker that takes the unit over recomputes the hours after rollups_to from the
 * stored analysis, and after a clean stop (which writes the rollups still held) the stored
 * rollups equal a recompute of every bucket from the analysis and count every analysed ring.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { withTransaction } from '../../services/db/pool.ts';
import { recomputeRollups } from '../../services/worker/pipeline.ts';
import { healthyUnit, pick, registerUnit, simulate, until, writeRings } from './fixtures.ts';
import { startWorkerProcess, type WorkerProcess } from './processes.ts';

const unit = healthyUnit('held-1');
const RINGS = 40;
const STEP_MS = 5_000;
let db: TestDatabase;
const procs: WorkerProcess[] = [];

/** Rings of the simulated unit, stamped as if sent live: STEP_MS apart, the last one a few seconds ago. */
function liveRings() {
  const b = pick(simulate(unit, '2026-07-01T06:00:00Z', '2026-07-01T12:00:00Z', 5), (i) => i < RINGS);
  const t0 = Date.now() - RINGS * STEP_MS;
  for (let i = 0; i < b.count; i++) b.tsMs[i] = t0 + i * STEP_MS;
  return b;
}

async function analysed(): Promise<number> {
  const { rows } = await db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis`);
  return rows[0].n;
}

async function progress(): Promise<{ watermark: number; rollupsTo: number }> {
  const { rows } = await db.pool.query(
    `SELECT (extract(epoch from watermark_ts) * 1000)::float8 AS wm, CASE WHEN rollups_to = '-infinity' THEN NULL ELSE (extract(epoch from rollups_to) * 1000)::float8 END AS ru
       FROM analysis_progress WHERE unit_id = $1`,
    [unit.config.id],
  );
  return { watermark: Number(rows[0].wm), rollupsTo: rows[0].ru === null ? -Infinity : Number(rows[0].ru) };
}

async function rollups() {
  const { rows } = await db.pool.query(`SELECT period, metric, bucket, n, sum, min, max FROM analysis_rollups WHERE unit_id = $1 ORDER BY 1, 2, 3`, [unit.config.id]);
  return rows;
}

beforeAll(async () => {
  db = await createTestDatabase();
  await registerUnit(db.pool, unit);
});

afterAll(async () => {
  for (const p of procs) await p.kill();
  await db?.drop();
});

describe('rollups held in memory', () => {
  it('a worker killed while holding them: the next recomputes them, nothing is lost or counted twice', async () => {
    const rings = liveRings();
    const a = startWorkerProcess(db.url, 'held-a');
    procs.push(a);
    // Two rings at a time, as a gateway sends them live, each pair analysed before the next.
    // Until the rollups of the last rounds are seen held in the worker's memory only (the
    // stored ones lag the watermark; a pair may land just when the held ones are written).
    let sent = 0;
    let before = { watermark: NaN, rollupsTo: NaN };
    while (sent < 10 || (!(before.rollupsTo < before.watermark) && sent < 30)) {
      await writeRings(db.pool, rings, sent, sent + 2);
      sent += 2;
      await until(async () => (await analysed()) >= sent);
      before = await progress();
    }
    expect(before.watermark).toBe(rings.tsMs[sent - 1]);
    expect(before.rollupsTo).toBeLessThan(before.watermark);
    await a.kill();

    const b = startWorkerProcess(db.url, 'held-b');
    procs.push(b);
    for (; sent < RINGS; sent += 2) {
      await writeRings(db.pool, rings, sent, sent + 2);
      await until(async () => (await analysed()) >= sent + 2);
    }
    expect(await b.stop()).toBe(0);
    const after = await progress();
    expect(after.watermark).toBe(rings.tsMs[RINGS - 1]);
    expect(after.rollupsTo).toBe(after.watermark);

    // Every analysed ring counted once in the hours and in the days.
    const { rows } = await db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE ring_mean IS NOT NULL`);
    const stored = await rollups();
    const total = (period: string) => stored.filter((r) => r.period === period && r.metric === 'ring_mean').reduce((s, r) => s + r.n[0], 0);
    expect(total('hour')).toBe(rows[0].n);
    expect(total('day')).toBe(rows[0].n);

    // And equal to a recompute of every bucket from the stored analysis.
    await withTransaction(db.pool, (c) => recomputeRollups(c, unit.config.id, rings.tsMs[0], rings.tsMs[RINGS - 1]));
    const recomputed = await rollups();
    expect(recomputed.length).toBe(stored.length);
    for (let i = 0; i < stored.length; i++) {
      expect(stored[i].n).toEqual(recomputed[i].n);
      expect(stored[i].min).toEqual(recomputed[i].min);
      expect(stored[i].max).toEqual(recomputed[i].max);
      const s = stored[i].sum as number[];
      const r = recomputed[i].sum as number[];
      for (let k = 0; k < s.length; k++) expect(s[k]).toBeCloseTo(r[k], 3);
    }
  }, 120_000);
});
