/**
 * Fuel nozzles cleaned on a plugging chamber. The simulator plugs chamber 4 of the healthy
 * base-load demo unit over two weeks (25 % of its fuel lost at full depth) and cleans it on a
 * known date (its ground truth; the analysis is told only of the maintenance event). Three
 * units get the same rings:
 * - nz-live: the event is recorded before the rings arrive (as live operation would have it);
 * - nz-past: the event is recorded after the whole history was analysed: the rings from its
 *   time on are judged again, and must give the same answer as nz-live;
 * - nz-none: no event (the control): the same rings judged on the old baseline as drift.
 * With the event: the chamber 4 alert clears, a baseline is fitted from the steady rings of the
 * days after the work (in force at the ring time it falls due), and the weeks after carry no
 * drift finding; without it, the plugging's drift state lingers on after the cleaning.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestApp, type TestApp } from '../helpers/app.ts';
import { createLogger } from '../../services/db/logger.ts';
import { createEventsRepository } from '../../services/db/events.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { demoFleet, type SimUnit } from '../../services/sim/index.ts';
import { registerUnit, simulate, TEST_WORKER_ENV, waitForAnalysis, writeRings } from './fixtures.ts';
import type { Pool } from '../../services/db/pool.ts';

let t: TestApp;
let worker: Worker;
const FROM = '2026-05-01T00:00:00Z';
const TO = '2026-06-10T00:00:00Z';
const CLEANED = '2026-05-22T06:00:00Z';
const CLEANED_MS = Date.parse(CLEANED);
const AUTO_DAYS = 6;
const DAY = 86_400_000;
const base = demoFleet()[0];
const unit = (id: string): SimUnit => ({
  ...base,
  config: { ...base.config, id, name: `Nozzles ${id}` },
  faults: [{ kind: 'nozzle_plugging', chamber: 4, at: '2026-05-08T00:00:00Z', days: 14, depthPct: 25, cleanedAt: CLEANED }],
});
const rings = simulate(unit('nz-live'), FROM, TO, 5);
const lastRing = rings.tsMs[rings.count - 1];
const nozzles = (unitId: string) => ({ unitId, kind: 'nozzles_worked' as const, at: new Date(CLEANED_MS), thermocouples: null, chambers: [4], by: 'combustion engineer', note: 'chamber 4 nozzles cleaned', keyId: null });

async function settled(pool: Pool, unitId: string): Promise<boolean> {
  const { rows } = await pool.query(`SELECT watermark_ts, reanalyse_from, reanalysis_to FROM analysis_progress WHERE unit_id = $1`, [unitId]);
  const p = rows[0];
  return !!p && p.watermark_ts?.getTime() === lastRing && p.reanalyse_from === null && p.reanalysis_to === null;
}

async function waitSettled(pool: Pool, ids: string[]): Promise<void> {
  for (;;) {
    let all = true;
    for (const id of ids) all &&= await settled(pool, id);
    if (all) return;
    await new Promise((r) => setTimeout(r, 200));
  }
}

async function baselinesOf(unitId: string) {
  const { rows } = await t.db.pool.query(`SELECT version, window_from, window_to, effective_from, fitted_by FROM baselines WHERE unit_id = $1 ORDER BY version`, [unitId]);
  return rows.map((r) => ({ version: r.version as number, from: (r.window_from as Date).getTime(), to: (r.window_to as Date).getTime(), effective: (r.effective_from as Date).getTime(), by: r.fitted_by as string }));
}

async function alertsOf(unitId: string) {
  const { rows } = await t.db.pool.query(
    `SELECT kind, chamber, thermocouple, grade, active, raised_at, cleared_at, evidence FROM alerts WHERE unit_id = $1 AND rewound_at IS NULL ORDER BY raised_at, kind, chamber, thermocouple`,
    [unitId],
  );
  return rows as { kind: string; chamber: number | null; thermocouple: number | null; grade: string; active: boolean; raised_at: Date; cleared_at: Date | null; evidence: Record<string, unknown> }[];
}

/** Rings after fromMs whose findings include a drift finding (chamber or thermocouple). */
async function driftRingsAfter(unitId: string, fromMs: number): Promise<number> {
  const { rows } = await t.db.pool.query(
    `SELECT count(*)::int AS n FROM ring_analysis WHERE unit_id = $1 AND ts > $2 AND (findings @> '[{"kind":"chamber_drift"}]' OR findings::text LIKE '%drift%')`,
    [unitId, new Date(fromMs)],
  );
  return rows[0].n as number;
}

beforeAll(async () => {
  t = await createTestApp({ env: { ...TEST_WORKER_ENV, CANSIGHT_WORKER_BATCH_RINGS: '50000', CANSIGHT_BASELINE_AUTO_DAYS: String(AUTO_DAYS) } });
  const events = createEventsRepository(t.db.pool);
  for (const id of ['nz-live', 'nz-past', 'nz-none']) await registerUnit(t.db.pool, unit(id));
  await events.create(nozzles('nz-live'));
  for (const id of ['nz-live', 'nz-past', 'nz-none']) await writeRings(t.db.pool, { ...rings, unitId: id });
  worker = await startWorker({ pool: t.db.pool, logger: createLogger(t.config.logLevel), config: t.config, workerId: 'w-nozzles' });
  await waitForAnalysis(t.db.pool);
  await waitSettled(t.db.pool, ['nz-live', 'nz-past', 'nz-none']);
  // Recorded once the whole history has been analysed: the rings from its time on are judged again.
  const past = await events.create(nozzles('nz-past'));
  expect(past.reanalysed).toBe(true);
  await new Promise((r) => setTimeout(r, 500));
  await waitSettled(t.db.pool, ['nz-past']);
}, 400_000);

afterAll(async () => {
  await worker?.stop();
  await t?.close();
});

describe('fuel nozzles cleaned on a plugging chamber', () => {
  it('the plugging was found: a chamber 4 alert raised before the cleaning (on every unit)', async () => {
    for (const id of ['nz-live', 'nz-none']) {
      const ch4 = (await alertsOf(id)).filter((a) => a.chamber === 4 && (a.kind === 'chamber_cold' || a.kind === 'chamber_drift'));
      expect(ch4.length, id).toBeGreaterThan(0);
      expect(ch4[0].raised_at.getTime(), id).toBeLessThan(CLEANED_MS);
    }
  });

  it('the alert clears after the cleaning: nothing about chamber 4 is active at the end', async () => {
    const all = await alertsOf('nz-live');
    expect(all.filter((a) => a.chamber === 4 && a.active)).toEqual([]);
    const cleared = all.filter((a) => a.chamber === 4 && a.cleared_at !== null);
    expect(cleared.length).toBeGreaterThan(0);
  });

  it('a new baseline is fitted from the days after the work, in force at the ring time it falls due', async () => {
    const b = await baselinesOf('nz-live');
    const after = b.filter((x) => x.from >= CLEANED_MS);
    expect(after).toHaveLength(1);
    expect(after[0]).toMatchObject({ from: CLEANED_MS, to: CLEANED_MS + AUTO_DAYS * DAY, by: 'automatic' });
    const { rows } = await t.db.pool.query(`SELECT min(ts) AS ts FROM ring_analysis WHERE unit_id = 'nz-live' AND baseline_version = $1`, [after[0].version]);
    const judged = (rows[0].ts as Date).getTime();
    expect(judged).toBeGreaterThanOrEqual(after[0].effective);
    expect(judged - after[0].effective).toBeLessThan(15 * 60_000);
    // The control has no such baseline: only the first fit.
    expect((await baselinesOf('nz-none')).filter((x) => x.from >= CLEANED_MS)).toEqual([]);
  });

  it('no false drift in the weeks after the work; the control, judged as drift, has it', async () => {
    // From the day after the work (the day of the work holds the plugged rings too).
    const from = CLEANED_MS + DAY;
    expect(await driftRingsAfter('nz-live', from)).toBe(0);
    const driftAlerts = (await alertsOf('nz-live')).filter((a) => a.kind === 'chamber_drift' && a.raised_at.getTime() > CLEANED_MS);
    expect(driftAlerts).toEqual([]);
    expect(await driftRingsAfter('nz-none', from)).toBeGreaterThan(0);
  });

  it('an event recorded after the rings were analysed gives the same answer as one recorded before them', async () => {
    const strip = (b: Awaited<ReturnType<typeof baselinesOf>>) => b.map(({ version, from, to, effective, by }) => ({ version, from, to, effective, by }));
    expect(strip(await baselinesOf('nz-past'))).toEqual(strip(await baselinesOf('nz-live')));
    const key = (a: Awaited<ReturnType<typeof alertsOf>>[number]) => ({ kind: a.kind, chamber: a.chamber, thermocouple: a.thermocouple, grade: a.grade, active: a.active, raised: a.raised_at.toISOString(), cleared: a.cleared_at?.toISOString() ?? null });
    expect((await alertsOf('nz-past')).map(key)).toEqual((await alertsOf('nz-live')).map(key));
    const findings = async (id: string) =>
      (await t.db.pool.query(`SELECT count(*)::int AS n, count(*) FILTER (WHERE findings IS NOT NULL)::int AS f, count(DISTINCT baseline_version)::int AS v FROM ring_analysis WHERE unit_id = $1 AND ts >= $2`, [id, new Date(CLEANED_MS)])).rows[0];
    expect(await findings('nz-past')).toEqual(await findings('nz-live'));
  });
});
