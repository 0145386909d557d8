/**
 * Shared pieces of the worker tests: simulated units registered and their rings written the
 * way ingest writes them (binary COPY, then a NOTIFY naming the unit, in one transaction), a
 * configuration for fast leases, and waiting for the analysis to catch up (by counts, never
 * by elapsed time).
 */
import { simulateUnit, demoFleet, type SimUnit, type RingBatch } from '../../services/sim/index.ts';
import { loadConfig, type Config } from '../../services/db/config.ts';
import { copyBinary, NEW_RINGS_CHANNEL, RingCopyEncoder } from '../../services/db/rings.ts';
import { createUnitsRepository } from '../../services/db/units.ts';
import { withTransaction, type Pool } from '../../services/db/pool.ts';
import { expect } from 'vitest';
import { analysisTotals } from '../../services/db/progress.ts';

/** Worker settings for tests: short leases, small batches. */
export const TEST_WORKER_ENV: Record<string, string> = {
  LOG_LEVEL: process.env.TEST_LOG_LEVEL ?? 'silent',
  CANSIGHT_WORKER_LEASE_S: '4',
  CANSIGHT_WORKER_CLAIM_EVERY_S: '1',
  CANSIGHT_WORKER_BATCH_RINGS: '1000',
  CANSIGHT_WORKER_SWEEP_CRON: '*/2 * * * * *',
  // The nightly drift job goes by the wall clock: a test that is about it calls it with the time it chooses.
  CANSIGHT_DRIFT_CRON: 'off',
};

export function testConfig(env: Record<string, string> = {}): Config {
  return loadConfig({ ...TEST_WORKER_ENV, ...env });
}

/** The healthy base-load demo unit (hp-1), renamed. */
export function healthyUnit(id: string): SimUnit {
  const u = demoFleet()[0];
  return { ...u, config: { ...u.config, id, name: `Test ${id}` } };
}

export async function registerUnit(pool: Pool, unit: SimUnit): Promise<void> {
  const { id, name, site, ...config } = unit.config;
  await createUnitsRepository(pool).create({ id, name, site }, config, 'test');
}

export function simulate(unit: SimUnit, from: string, to: string, seed = 7): RingBatch {
  return simulateUnit(unit, { from, to, seed }).batch();
}

/** Rings [lo, hi) of a batch, as ingest would store them, with the NOTIFY on commit. */
export async function writeRings(pool: Pool, b: RingBatch, lo = 0, hi = b.count, notify = true): Promise<number> {
  const enc = new RingCopyEncoder();
  const m = b.thermocoupleCount;
  for (let r = lo; r < hi; r++) {
    enc.add({
      unitId: b.unitId,
      tsMs: b.tsMs[r],
      loadMw: b.loadMw[r],
      ambientC: b.ambientC[r],
      ambientKPa: b.ambientKPa[r],
      speedPct: b.speedPct[r],
      cdtC: null,
      cdpKPa: null,
      fuelFlowKgS: b.fuelFlowKgS[r],
      flameDetected: b.flameDetected[r] === 1,
      exhaustC: b.exhaustC.subarray(r * m, (r + 1) * m),
    });
  }
  if (enc.count === 0) return 0;
  await withTransaction(pool, async (c) => {
    await copyBinary(c, 'rings', enc.finish());
    if (notify) await c.query('SELECT pg_notify($1, $2)', [NEW_RINGS_CHANNEL, JSON.stringify([b.unitId])]);
  });
  return enc.count;
}

/** A subset of a batch's rings (by index), as a new batch. */
export function pick(b: RingBatch, keep: (i: number) => boolean): RingBatch {
  const idx: number[] = [];
  for (let i = 0; i < b.count; i++) if (keep(i)) idx.push(i);
  const m = b.thermocoupleCount;
  const col = (a: Float64Array) => Float64Array.from(idx, (i) => a[i]);
  const ex = new Float64Array(idx.length * m);
  idx.forEach((i, j) => ex.set(b.exhaustC.subarray(i * m, (i + 1) * m), j * m));
  return {
    unitId: b.unitId,
    count: idx.length,
    thermocoupleCount: m,
    tsMs: col(b.tsMs),
    loadMw: col(b.loadMw),
    ambientC: col(b.ambientC),
    ambientKPa: col(b.ambientKPa),
    speedPct: col(b.speedPct),
    fuelFlowKgS: col(b.fuelFlowKgS),
    flameDetected: Uint8Array.from(idx, (i) => b.flameDetected[i]),
    exhaustC: ex,
  };
}

/** Waits until every stored ring has its analysis (polling counts). */
export async function waitForAnalysis(pool: Pool, pollMs = 100): Promise<{ stored: number; analysed: number }> {
  for (;;) {
    const t = await analysisTotals(pool);
    if (t.stored > 0 && t.analysed === t.stored) return t;
    await new Promise((r) => setTimeout(r, pollMs));
  }
}

/**
 * Every one of `stored` rings analysed exactly once: the analysis, the in-order batch log and
 * the progress counters all count `stored`, and no unit's logged batches overlap in time.
 * Returns the in-order batches (unit, worker, span) for further checks.
 */
export async function expectEveryRingAnalysedOnce(pool: Pool, stored: number): Promise<{ unit_id: string; worker_id: string; from_ts: Date; to_ts: Date }[]> {
  const t = await analysisTotals(pool);
  expect(t.stored).toBe(stored);
  expect(t.analysed).toBe(stored);
  expect(t.inOrderBatchRings).toBe(stored);
  expect(t.inOrderProgress).toBe(stored);
  const { rows } = await pool.query(`SELECT unit_id, worker_id, from_ts, to_ts FROM analysis_batches WHERE kind = 'in_order' ORDER BY unit_id, from_ts`);
  for (let i = 1; i < rows.length; i++) {
    if (rows[i].unit_id === rows[i - 1].unit_id) expect(rows[i].from_ts.getTime()).toBeGreaterThan(rows[i - 1].to_ts.getTime());
  }
  return rows;
}

/** Waits until cond() holds (polling). */
export async function until(cond: () => Promise<boolean>, pollMs = 100): Promise<void> {
  while (!(await cond())) await new Promise((r) => setTimeout(r, pollMs));
}

/** Every rule-driven alert change, in a form that does not depend on ids or wall-clock time (for comparing two runs over the same rings). */
export async function alertChanges(pool: Pool): Promise<string[]> {
  const { rows } = await pool.query(
    `SELECT h.unit_id, a.condition_key, h.action, h.grade, h.from_grade, h.at
       FROM alert_history h JOIN alerts a ON a.id = h.alert_id
      WHERE a.kind <> 'unit_silent'
      ORDER BY h.unit_id, h.at, a.condition_key, h.action`,
  );
  return rows.map((r) => `${r.unit_id} ${r.condition_key} ${r.action} ${r.from_grade ?? '-'}→${r.grade} @${r.at.toISOString()}`);
}
