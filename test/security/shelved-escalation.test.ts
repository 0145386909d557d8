/**
 * Shelving suppresses an alarm as it was when it was shelved (ISA-18.2, shelving): a rise to
 * alarm or critical while shelved takes the alert off its shelf, records why, and is announced;
 * a smaller rise stays shelved and silent. A shelf records the key it was set with beside the
 * name a person typed.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { addUnit, apply, finding, obs, settings } from '../helpers/alerts.ts';
import { bearer, createTestApp, unitBody } from '../helpers/app.ts';
import { createWebhook, outboxRows } from '../../services/db/webhooks.ts';
import { shelveAlert } from '../../services/db/alert-actions.ts';
import { getAlert } from '../../services/db/alert-reads.ts';

let db: TestDatabase;
let n = 0;
beforeAll(async () => {
  db = await createTestDatabase();
});
afterAll(async () => db.drop());

/** A unit with a subscription at `minGrade`, one alert raised at `grade`, then shelved for an hour of wall time. */
async function shelvedAlert(grade: 'notice' | 'warning', minGrade: 'notice' | 'warning') {
  const unitId = `shelf-${n++}`;
  await addUnit(db.pool, unitId);
  const hook = await createWebhook(db.pool, { url: 'https://receiver.example.org/hook', minGrade, secret: 'shelf-test-secret-0001', unitIds: [unitId], createdBy: 'test' });
  const s = settings({ on: 0, grade: 0 });
  const [raised] = await apply(db.pool, unitId, [obs(0, [finding('chamber_cold', grade)])], s);
  const wall = new Date();
  await shelveAlert(db.pool, raised.alertId, { by: 'shift operator 1', until: new Date(wall.getTime() + 3_600_000), reason: 'inspection booked', now: wall });
  const events = async () => (await outboxRows(db.pool, { webhookId: hook.id })).map((r) => r.event);
  return { unitId, s, alertId: raised.alertId, events };
}

describe('an alert that rises while shelved', () => {
  it('comes off its shelf at alarm, with an unshelved row that says why, and the rise is sent', async () => {
    const { unitId, s, alertId, events } = await shelvedAlert('warning', 'warning');
    expect(await events()).toEqual(['raised', 'shelved']);
    await apply(db.pool, unitId, [obs(60, [finding('chamber_cold', 'alarm')])], s);
    const a = (await getAlert(db.pool, alertId))!;
    expect(a.grade).toBe('alarm');
    expect(a.shelvedUntil).toBeNull();
    expect(a.history!.map((h) => h.action)).toEqual(['raised', 'shelved', 'unshelved', 'escalated']);
    expect(a.history![2].details).toMatchObject({ cause: 'escalated while shelved', toGrade: 'alarm' });
    expect(await events()).toEqual(['raised', 'shelved', 'escalated']);
  });

  it('stays shelved and silent on a rise below alarm', async () => {
    const { unitId, s, alertId, events } = await shelvedAlert('notice', 'notice');
    await apply(db.pool, unitId, [obs(60, [finding('chamber_cold', 'warning')])], s);
    const a = (await getAlert(db.pool, alertId))!;
    expect(a.grade).toBe('warning');
    expect(a.shelvedUntil).not.toBeNull();
    expect(a.history!.map((h) => h.action)).toEqual(['raised', 'shelved', 'escalated']);
    expect(await events()).toEqual(['raised', 'shelved']);
  });
});

describe('shelving through the API', () => {
  it("records the operator's key id beside the name typed", async () => {
    const t = await createTestApp();
    try {
      await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('shelf-api') });
      const [raised] = await apply(t.db.pool, 'shelf-api', [obs(0, [finding('chamber_cold', 'warning')])], settings({ on: 0 }));
      const who = (await t.app.inject({ url: '/v1/whoami', headers: bearer(t.keys.operator) })).json();
      const res = await t.app.inject({ method: 'POST', url: `/v1/alerts/${raised.alertId}/shelve`, headers: bearer(t.keys.operator), payload: { by: 'shift operator 1', until: new Date(Date.now() + 3_600_000).toISOString(), reason: 'inspection booked' } });
      expect(res.statusCode, res.body).toBe(200);
      const shelved = res.json().history.find((h: { action: string }) => h.action === 'shelved');
      expect(shelved).toMatchObject({ by: 'shift operator 1', details: { key: who.keyId } });
      expect(who.keyId).toMatch(/^key-[0-9a-f]{12}$/);
    } finally {
      await t.close();
    }
  });
});
