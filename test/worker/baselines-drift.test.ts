/**
 * Baselines and drift end to end: a unit whose chamber 4 fuel nozzle plugs slowly (the
 * simulator's ground truth) gets its first baseline automatically after the configured days,
 * the nightly drift names chamber 4 as cooling against that baseline, and the drift state
 * reaches the findings of the rings analysed afterwards. A refit over a chosen window is
 * accepted (202) and fitted by the worker as a new version, leaving the older one and the
 * analysis made with it as they were; a window that cannot be fitted is refused at once (422);
 * a refit over a window not yet analysed is fitted once analysis passes it.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS, type Transport } from '../helpers/transport.ts';
import { createLogger } from '../../services/db/logger.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { readDriftStates } from '../../services/db/drift.ts';
import { demoFleet, type SimUnit } from '../../services/sim/index.ts';
import { pick, registerUnit, simulate, TEST_WORKER_ENV, until, waitForAnalysis, writeRings } from './fixtures.ts';

let t: TestApp;
let worker: Worker;
const FROM = '2026-05-01T00:00:00Z';
const DRIFT_AT = Date.parse('2026-05-25T00:00:00Z');
const TO = '2026-05-28T00:00:00Z';
const base = demoFleet()[0];
const unit: SimUnit = {
  ...base,
  config: { ...base.config, id: 'plug-1', name: 'Plugging unit' },
  faults: [{ kind: 'nozzle_plugging', chamber: 4, at: '2026-05-08T00:00:00Z', days: 14, depthPct: 25 }],
};
const rings = simulate(unit, FROM, TO, 5);
const env = { ...TEST_WORKER_ENV, CANSIGHT_WORKER_BATCH_RINGS: '5000', CANSIGHT_BASELINE_AUTO_DAYS: '6' };

beforeAll(async () => {
  t = await createTestApp({ env });
  await registerUnit(t.db.pool, unit);
  worker = await startWorker({ pool: t.db.pool, logger: createLogger(t.config.logLevel), config: t.config, workerId: 'w-drift' });
  await writeRings(t.db.pool, pick(rings, (i) => rings.tsMs[i] < DRIFT_AT));
  await waitForAnalysis(t.db.pool);
}, 170_000);

afterAll(async () => {
  await worker?.stop();
  await t?.close();
});

const get = (url: string) => t.app.inject({ method: 'GET', url, headers: bearer(t.keys.viewer) });
/** POST /v1/units/plug-1/baselines {from, to} as an admin: a refit on request. */
const refit = (from: string, to: string, via: Transport = 'inject') => t.sendVia(via, { method: 'POST', url: '/v1/units/plug-1/baselines', headers: bearer(t.keys.admin), payload: { from, to } });

describe('baselines and drift', () => {
  it('fits the first baseline automatically from the first days of steady data, with bins and counts', async () => {
    const res = await get('/v1/units/plug-1/baselines');
    expect(res.statusCode).toBe(200);
    const { baselines } = res.json();
    expect(baselines).toHaveLength(1);
    const b = baselines[0];
    expect(b).toMatchObject({ version: 1, inForce: true, fittedBy: 'automatic', method: 'binned-median-mad' });
    expect((Date.parse(b.window.to) - Date.parse(b.window.from)) / 86_400_000).toBeCloseTo(6, 5);
    expect(b.bins.some((x: { fitted: boolean; count: number }) => x.fitted && x.count >= 30)).toBe(true);
    const { rows } = await t.db.pool.query(`SELECT min(ts) AS first FROM ring_analysis WHERE baseline_version = 1`);
    expect(rows[0].first.getTime()).toBeGreaterThanOrEqual(Date.parse(b.window.to) - 86_400_000);
  });

  it('nightly drift names chamber 4 as cooling, with its rate and interval against version 1', async () => {
    await worker.runDrift(DRIFT_AT);
    const chambers = (await readDriftStates(t.db.pool, 'plug-1')).filter((s) => s.subject === 'chamber');
    expect(chambers).toHaveLength(unit.config.chambers.count);
    const rated = chambers.filter((c) => c.rate !== null);
    const coolest = rated.reduce((a, b) => ((b.rate?.per30DaysDegC ?? 0) < (a.rate?.per30DaysDegC ?? 0) ? b : a));
    expect(coolest.idx).toBe(4);
    expect(coolest.baselineVersion).toBe(1);
    expect(coolest.rate!.per30DaysDegC).toBeLessThan(0);
    expect(coolest.rate!.per30DaysInterval[1]).toBeLessThan(0);
    expect(coolest.rate!.per1000FiredHoursDegC).not.toBeNull();
    expect(coolest.cusum.lower).toBeGreaterThan(coolest.cusum.upper);
  });

  it('feeds the drift state to the findings of the rings analysed next', async () => {
    await writeRings(t.db.pool, pick(rings, (i) => rings.tsMs[i] >= DRIFT_AT && rings.tsMs[i] < DRIFT_AT + 86_400_000));
    await waitForAnalysis(t.db.pool);
    const { rows } = await t.db.pool.query(
      `SELECT count(*)::int AS n FROM ring_analysis WHERE ts >= $1 AND findings @> '[{"kind":"chamber_drift","chamber":4}]'`,
      [new Date(DRIFT_AT)],
    );
    expect(rows[0].n).toBeGreaterThan(0);
  });

  it('refits on request as a new version and never rewrites the older one or its analysis', async () => {
    const before = await t.db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE baseline_version = 1`);
    const res = await refit('2026-05-02T00:00:00Z', '2026-05-09T00:00:00Z');
    expect(res.statusCode, res.body).toBe(202);
    expect(res.headers.location).toBe('/v1/units/plug-1/baselines');
    expect(res.json()).toMatchObject({ state: 'pending', window: { from: '2026-05-02T00:00:00.000Z', to: '2026-05-09T00:00:00.000Z' } });
    // The worker fits the request (its window is analysed already) at its next sweep.
    await until(async () => {
      await worker.sweep();
      return (await get('/v1/units/plug-1/baselines')).json().requests[0].state !== 'pending';
    });
    const fitted = (await get('/v1/units/plug-1/baselines')).json();
    expect(fitted.requests[0]).toMatchObject({ id: res.json().id, state: 'fitted', version: 2 });
    expect(fitted.baselines[0]).toMatchObject({ version: 2, inForce: true, window: { from: '2026-05-02T00:00:00.000Z', to: '2026-05-09T00:00:00.000Z' } });
    const list = fitted.baselines;
    expect(list.map((b: { version: number }) => b.version)).toEqual([2, 1]);
    expect(list[1].fittedBy).toBe('automatic');
    const after = await t.db.pool.query(`SELECT count(*)::int AS n FROM ring_analysis WHERE baseline_version = 1`);
    expect(after.rows[0].n).toBe(before.rows[0].n);
    for (const via of TRANSPORTS) {
      const thin = await refit('2026-05-02T00:00:00Z', '2026-05-02T00:20:00Z', via);
      expect(thin.statusCode, via).toBe(422);
      expect(thin.json().error).toBe('invalid');
    }
  });

  it('accepts a refit over a window not yet analysed (202) and fits it once analysis has passed the window', async () => {
    const res = await refit('2026-05-20T00:00:00Z', '2026-05-27T00:00:00Z');
    expect(res.statusCode, res.body).toBe(202);
    expect(res.json().state).toBe('pending');
    await writeRings(t.db.pool, pick(rings, (i) => rings.tsMs[i] >= DRIFT_AT + 86_400_000));
    await waitForAnalysis(t.db.pool);
    await until(async () => {
      await worker.sweep();
      const r = (await get('/v1/units/plug-1/baselines')).json().requests[0];
      return r.state !== 'pending';
    });
    const body = (await get('/v1/units/plug-1/baselines')).json();
    expect(body.requests[0]).toMatchObject({ state: 'fitted', version: 3 });
    expect(body.baselines[0]).toMatchObject({ version: 3, window: { from: '2026-05-20T00:00:00.000Z', to: '2026-05-27T00:00:00.000Z' } });
  });

  it('status shows the latest analysis, its limit and baseline version, and the progress of analysis', async () => {
    const res = await get('/v1/units/plug-1/status');
    expect(res.statusCode).toBe(200);
    const s = res.json();
    expect(s.ts).toBe(new Date(rings.tsMs[rings.count - 1]).toISOString());
    expect(s.lastRingTs).toBe(s.ts);
    expect(s.progress).toMatchObject({ ringsStored: rings.count, ringsAnalysed: rings.count, ringsPending: 0, workerId: 'w-drift' });
    expect(s.chambers).toHaveLength(unit.config.chambers.count);
    expect(typeof s.limit).toBe('number');
    expect(s.coverage.total).toBe(unit.config.thermocouples.count);
    expect(Array.isArray(s.activeAlerts)).toBe(true);
  });
});
