/**
 * Drift follows ring time. A plugging chamber's history stored in one go (as `cansight import`
 * leaves it) gets its drift state day by day as the analysis passes each ring-time day, with no
 * nightly run: chamber 4 is found cooling, the state reaches the day before the last ring's day,
 * and the rings of later days carry chamber_drift findings. (The plugging is the simulator's
 * ground truth; the solver is not told of it.)
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestApp, type TestApp } from '../helpers/app.ts';
import { createLogger } from '../../services/db/logger.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { readDriftStates } from '../../services/db/drift.ts';
import { demoFleet, type SimUnit } from '../../services/sim/index.ts';
import { registerUnit, simulate, TEST_WORKER_ENV, waitForAnalysis, writeRings } from './fixtures.ts';

let t: TestApp;
let worker: Worker;
const FROM = '2026-05-01T00:00:00Z';
const TO = '2026-05-28T00:00:00Z';
const base = demoFleet()[0];
const unit: SimUnit = {
  ...base,
  config: { ...base.config, id: 'hist-1', name: 'History unit' },
  faults: [{ kind: 'nozzle_plugging', chamber: 4, at: '2026-05-08T00:00:00Z', days: 14, depthPct: 25 }],
};
const rings = simulate(unit, FROM, TO, 5);

beforeAll(async () => {
  t = await createTestApp({ env: { ...TEST_WORKER_ENV, CANSIGHT_WORKER_BATCH_RINGS: '50000', CANSIGHT_BASELINE_AUTO_DAYS: '6' } });
  await registerUnit(t.db.pool, unit);
  // The whole history at once, before any worker runs: nothing of it is live.
  await writeRings(t.db.pool, rings);
  worker = await startWorker({ pool: t.db.pool, logger: createLogger(t.config.logLevel), config: t.config, workerId: 'w-history' });
  await waitForAnalysis(t.db.pool);
}, 170_000);

afterAll(async () => {
  await worker?.stop();
  await t?.close();
});

describe('one timeline in ring time', () => {
  it('fits the first baseline at the ring time it falls due: the rings just after it are judged with it', async () => {
    const { rows } = await t.db.pool.query(`SELECT window_to FROM baselines WHERE unit_id = 'hist-1' AND version = 1`);
    expect(rows).toHaveLength(1);
    const due = (rows[0].window_to as Date).getTime();
    const first = await t.db.pool.query(`SELECT min(ts) AS ts FROM ring_analysis WHERE unit_id = 'hist-1' AND baseline_version = 1`);
    const judged = (first.rows[0].ts as Date).getTime();
    expect(judged).toBeGreaterThanOrEqual(due);
    // The next ring after the due time (rings are minutes apart here), not a batch or a day later.
    expect(judged - due).toBeLessThan(15 * 60_000);
  });
});

describe('drift in ring time', () => {
  it('a history analysed in one go has its drift state, without a nightly run: chamber 4 cooling, up to the day before its last ring', async () => {
    const chambers = (await readDriftStates(t.db.pool, 'hist-1')).filter((s) => s.subject === 'chamber');
    expect(chambers).toHaveLength(unit.config.chambers.count);
    const lastRingDay = new Date(rings.tsMs[rings.count - 1]).toISOString().slice(0, 10);
    const dayBefore = new Date(Date.parse(lastRingDay) - 86_400_000).toISOString().slice(0, 10);
    expect(chambers.map((c) => c.lastDay).sort().at(-1)).toBe(dayBefore);
    const rated = chambers.filter((c) => c.rate !== null);
    const coolest = rated.reduce((a, b) => ((b.rate?.per30DaysDegC ?? 0) < (a.rate?.per30DaysDegC ?? 0) ? b : a));
    expect(coolest.idx).toBe(4);
    expect(coolest.rate!.per30DaysDegC).toBeLessThan(0);
    expect(coolest.rate!.per30DaysInterval[1]).toBeLessThan(0);
  });

  it('the rings of later days carry the chamber drift finding for chamber 4', async () => {
    const { rows } = await t.db.pool.query(`SELECT count(*)::int AS n, min(ts) AS first FROM ring_analysis WHERE unit_id = 'hist-1' AND findings @> '[{"kind":"chamber_drift","chamber":4}]'`);
    expect(rows[0].n).toBeGreaterThan(0);
    expect(rows[0].first.getTime()).toBeLessThan(rings.tsMs[rings.count - 1]);
  });
});
