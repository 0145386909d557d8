/**
 * History that arrives out of order gives the same answers as the same history in order. Five
 * weeks of a unit (a lost flame in the first week, an open thermocouple in the third, a chamber
 * plugging from the fourth) go to two units with identical rings: one gets them in ring order
 * in one go; the other gets its second third, then its last third, then its first third, each
 * analysed before the next arrives (as a history sent file by file in any order would be). The
 * rings that arrive before the watermark send the unit back to be judged again from the
 * earliest of them: both end with every ring analysed once, the same alerts of the ring rules
 * (kind, subject, grade, ring times raised and cleared) and the same drift rates. (Starts are
 * recorded as their rings arrive; a start inside rings that arrive after later ones is not
 * detected, so start findings are left out of the comparison.)
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestApp, type TestApp } from '../helpers/app.ts';
import { createLogger } from '../../services/db/logger.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { readDriftStates } from '../../services/db/drift.ts';
import { demoFleet, type SimUnit } from '../../services/sim/index.ts';
import type { RingBatch } from '../../services/sim/types.ts';
import type { Pool } from '../../services/db/pool.ts';
import { pick, registerUnit, simulate, TEST_WORKER_ENV, until, writeRings } from './fixtures.ts';

const FROM = '2026-03-01T00:00:00Z';
const TO = '2026-04-05T00:00:00Z';
const base = demoFleet()[0];
const unitOf = (id: string): SimUnit => ({
  ...base,
  config: { ...base.config, id, name: `Order ${id}` },
  faults: [
    { kind: 'flame_loss', chamber: 3, at: '2026-03-05T10:00:00Z', durationH: 3 },
    { kind: 'tc_open', thermocouple: 7, at: '2026-03-16T06:00:00Z', until: '2026-03-17T06:00:00Z', readsC: -20 },
    { kind: 'nozzle_plugging', chamber: 4, at: '2026-03-22T00:00:00Z', days: 10, depthPct: 25 },
  ],
});
const rings = simulate(unitOf('in-order'), FROM, TO, 9);
const as = (b: RingBatch, unitId: string): RingBatch => ({ ...b, unitId });
const third = (rings.tsMs[rings.count - 1] - rings.tsMs[0]) / 3;
const partOf = (i: number) => Math.min(2, Math.floor((rings.tsMs[i] - rings.tsMs[0]) / third));

let t: TestApp;
let worker: Worker;

async function caughtUp(pool: Pool, unitId: string, stored: number): Promise<boolean> {
  const { rows } = await pool.query(
    `SELECT (SELECT count(*) FROM ring_analysis WHERE unit_id = $1)::int AS analysed, p.reanalyse_from, p.reanalysis_to, p.watermark_ts,
            (SELECT max(ts) FROM rings WHERE unit_id = $1) AS last, p.rings_analysed + p.late_rings_analysed AS counted
       FROM analysis_progress p WHERE unit_id = $1`,
    [unitId],
  );
  const r = rows[0];
  return !!r && r.analysed === stored && Number(r.counted) === stored && r.reanalyse_from === null && r.reanalysis_to === null && r.watermark_ts?.getTime() === r.last?.getTime();
}

beforeAll(async () => {
  t = await createTestApp({ env: { ...TEST_WORKER_ENV, CANSIGHT_WORKER_BATCH_RINGS: '50000', CANSIGHT_BASELINE_AUTO_DAYS: '3', CANSIGHT_ALERT_OFF_DELAY_S: '3600' } });
  const pool = t.db.pool;
  await registerUnit(pool, unitOf('in-order'));
  await registerUnit(pool, unitOf('shuffled'));
  worker = await startWorker({ pool, logger: createLogger(t.config.logLevel), config: t.config, workerId: 'w-order' });
  await writeRings(pool, as(rings, 'in-order'));
  await until(() => caughtUp(pool, 'in-order', rings.count), 200);
  let stored = 0;
  for (const part of [1, 2, 0]) {
    const b = pick(as(rings, 'shuffled'), (i) => partOf(i) === part);
    stored += await writeRings(pool, b);
    await until(() => caughtUp(pool, 'shuffled', stored), 200);
  }
}, 600_000);

afterAll(async () => {
  await worker?.stop();
  await t?.close();
});

async function alertsOf(unitId: string): Promise<string[]> {
  const { rows } = await t.db.pool.query(
    `SELECT kind, chamber, thermocouple, grade, raised_at, cleared_at FROM alerts
      WHERE unit_id = $1 AND kind NOT IN ('unit_silent', 'chamber_unlit', 'start_failed') ORDER BY raised_at, kind, chamber, thermocouple`,
    [unitId],
  );
  return rows.map((r) => `${r.kind} ch${r.chamber ?? '-'} tc${r.thermocouple ?? '-'} ${r.grade} @${r.raised_at.toISOString()} cleared ${r.cleared_at?.toISOString() ?? '-'}`);
}

describe('a history that arrives out of order', () => {
  it('ends with the same alerts as the same history in order', async () => {
    const ordered = await alertsOf('in-order');
    expect(ordered.some((a) => a.startsWith('chamber_cold ch3'))).toBe(true);
    expect(ordered.some((a) => a.startsWith('thermocouple_fault ch- tc7'))).toBe(true);
    expect(await alertsOf('shuffled')).toEqual(ordered);
  });

  it('ends with the same drift rates', async () => {
    const ordered = await readDriftStates(t.db.pool, 'in-order');
    const shuffled = new Map((await readDriftStates(t.db.pool, 'shuffled')).map((s) => [`${s.subject}:${s.idx}`, s]));
    expect(ordered.length).toBeGreaterThan(0);
    for (const s of ordered) {
      const o = shuffled.get(`${s.subject}:${s.idx}`);
      expect(o?.lastDay).toBe(s.lastDay);
      expect(o?.rate?.per30DaysDegC ?? null).toBeCloseTo(s.rate?.per30DaysDegC ?? 0, 6);
    }
  });
});
