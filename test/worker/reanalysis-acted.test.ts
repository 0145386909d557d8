/**
 * An alert a person acted on survives its unit's rings being judged again. Eight days of a unit
 * whose thermocouple 7 reads open from day 5 on are analysed (first baseline after two days);
 * the thermocouple_fault alert is acknowledged by a shift operator. Then a baseline is requested
 * over the first two days, so the rings from day 2 on (the alert's among them) are judged again.
 * The same condition is raised again: it must be the same alert (same id), still acknowledged by
 * the same person with the same comment, with the person's history row kept and one open alert
 * for the condition, not a withdrawn alert beside a new one the operator would have to
 * acknowledge again.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createLogger } from '../../services/db/logger.ts';
import { acknowledgeAlert } from '../../services/db/alert-actions.ts';
import { insertBaselineRequest } from '../../services/db/baselines.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import type { SimUnit } from '../../services/sim/index.ts';
import type { Pool } from '../../services/db/pool.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { healthyUnit, registerUnit, simulate, testConfig, until, writeRings } from './fixtures.ts';

const FROM = '2026-08-01T00:00:00Z';
const unit: SimUnit = { ...healthyUnit('acted-1'), faults: [{ kind: 'tc_open', thermocouple: 7, at: '2026-08-05T06:00:00Z', readsC: -20 }] };
const rings = simulate(unit, FROM, '2026-08-09T00:00:00Z', 9);
const last = rings.tsMs[rings.count - 1];
const config = testConfig({ CANSIGHT_BASELINE_AUTO_DAYS: '2', CANSIGHT_WORKER_BATCH_RINGS: '5000' });
let db: TestDatabase;
let worker: Worker;
let before: { id: string; acked_by: string; ack_comment: string };

async function settled(pool: Pool): Promise<boolean> {
  const { rows } = await pool.query(`SELECT watermark_ts, reanalyse_from, reanalysis_to FROM analysis_progress WHERE unit_id = 'acted-1'`);
  const p = rows[0];
  return !!p?.watermark_ts && p.watermark_ts.getTime() === last && p.reanalyse_from === null && p.reanalysis_to === null;
}

const tcAlerts = async () =>
  (await db.pool.query(`SELECT id, active, acknowledged, acked_by, ack_comment, closed_at, rewound_at FROM alerts WHERE unit_id = 'acted-1' AND kind = 'thermocouple_fault' AND thermocouple = 7 ORDER BY raised_at`)).rows;

beforeAll(async () => {
  db = await createTestDatabase();
  await registerUnit(db.pool, unit);
  await writeRings(db.pool, rings);
  worker = await startWorker({ pool: db.pool, logger: createLogger(config.logLevel), config, workerId: 'w-acted' });
  await until(() => settled(db.pool));
  const [a] = await tcAlerts();
  await acknowledgeAlert(db.pool, a.id, { by: 'shift operator 1', comment: 'probe 7 to be checked at the next stop', now: new Date() });
  before = (await tcAlerts())[0];
  await insertBaselineRequest(db.pool, 'acted-1', Date.parse(FROM), Date.parse('2026-08-03T00:00:00Z'), 'test');
  await until(async () => (await db.pool.query(`SELECT state FROM baseline_requests WHERE unit_id = 'acted-1'`)).rows[0].state === 'fitted');
  await until(() => settled(db.pool));
}, 300_000);

afterAll(async () => {
  await worker?.stop();
  await db?.drop();
});

describe('an acknowledged alert whose rings are judged again', () => {
  it('was acknowledged by the operator before the refit', () => {
    expect(before.acked_by).toBe('shift operator 1');
  });

  it('is the same alert afterwards, still acknowledged by the same person, and the only one for its condition', async () => {
    const after = await tcAlerts();
    expect(after.map((a) => a.id)).toEqual([before.id]);
    expect(after[0]).toMatchObject({ active: true, acknowledged: true, acked_by: 'shift operator 1', ack_comment: 'probe 7 to be checked at the next stop', closed_at: null, rewound_at: null });
  });

  it('keeps the person\'s history row, and the rules\' own history starts again with one raise', async () => {
    const { rows } = await db.pool.query(`SELECT action, by FROM alert_history WHERE alert_id = $1 ORDER BY id`, [before.id]);
    expect(rows.filter((r) => r.action === 'acknowledged').map((r) => r.by)).toEqual(['shift operator 1']);
    expect(rows.filter((r) => r.action === 'raised')).toHaveLength(1);
    expect(rows.some((r) => r.action === 'withdrawn')).toBe(false);
  });
});
