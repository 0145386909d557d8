/**
 * Shelving and its expiry, unshelving, and unit_silent, driven by the `now` passed to the jobs.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { addUnit, apply, finding, obs, settings } from '../helpers/alerts.ts';
import { AlertClosedError, acknowledgeAlert, shelveAlert, unshelveAlert } from '../../services/db/alert-actions.ts';
import { alertHistory, getAlert, listAlerts } from '../../services/db/alert-reads.ts';
import { checkSilentUnits, expireShelves } from '../../services/worker/alert-jobs.ts';

let db: TestDatabase;
let n = 0;
async function unit(): Promise<string> {
  const id = `job-${n++}`;
  await addUnit(db.pool, id);
  return id;
}
async function ring(unitId: string, ts: Date, receivedAt: Date = ts): Promise<void> {
  await db.pool.query(
    `INSERT INTO rings (unit_id, ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c, received_at) VALUES ($1, $2, 21, 15, 101.3, 100, $3, $4)`,
    [unitId, ts, Array.from({ length: 18 }, () => 550), receivedAt],
  );
}
const ids = async (unitId: string, state: 'active' | 'shelved' | 'cleared' | 'open' | 'all', now = new Date()) =>
  (await listAlerts(db.pool, { scope: null, unitId, state, limit: 100, now })).alerts.map((a) => a.id);

beforeAll(async () => {
  db = await createTestDatabase();
});
afterAll(async () => db.drop());

describe('shelving', () => {
  it('a shelved alert comes back when its shelf expires, with one shelf_expired history row', async () => {
    const u = await unit();
    const [r] = await apply(db.pool, u, [obs(0, [finding('chamber_cold', 'alarm')])], settings({ on: 0 }));
    const wall = new Date();
    const until = new Date(wall.getTime() + 30 * 60_000);
    const shelved = await shelveAlert(db.pool, r.alertId, { by: 'shift operator 1', until, reason: 'borescope booked for Tuesday', now: wall });
    expect(shelved!.alert).toMatchObject({ shelvedUntil: until.toISOString(), shelvedBy: 'shift operator 1', shelveReason: 'borescope booked for Tuesday' });
    expect(await ids(u, 'active', wall)).toEqual([]);
    expect(await ids(u, 'shelved', wall)).toEqual([r.alertId]);

    expect(await expireShelves(db.pool, new Date(until.getTime() - 1))).toEqual([]);
    const back = await expireShelves(db.pool, until);
    expect(back.map((c) => [c.alertId, c.action])).toEqual([[r.alertId, 'shelf_expired']]);
    expect(await expireShelves(db.pool, new Date(until.getTime() + 60_000))).toEqual([]);
    const a = (await getAlert(db.pool, r.alertId))!;
    expect(a.shelvedUntil).toBeNull();
    expect(a.history!.map((h) => h.action)).toEqual(['raised', 'shelved', 'shelf_expired']);
    expect(a.history![2].details).toMatchObject({ until: until.toISOString(), shelvedBy: 'shift operator 1' });
    expect(await ids(u, 'active', until)).toEqual([r.alertId]);
  });

  it('two expiry runs at once bring each alert back once', async () => {
    const u = await unit();
    const fs = [1, 2, 3, 4, 5, 6, 7, 8].map((c) => finding('chamber_hot', 'warning', { chamber: c }));
    const changes = await apply(db.pool, u, [obs(0, fs)], settings({ on: 0 }));
    const wall = new Date();
    const until = new Date(wall.getTime() + 60_000);
    for (const c of changes) await shelveAlert(db.pool, c.alertId, { by: 'shift operator 1', until, reason: 'r', now: wall });
    const [x, y] = await Promise.all([expireShelves(db.pool, until), expireShelves(db.pool, until)]);
    expect(x.length + y.length).toBe(8);
    for (const c of changes) expect((await alertHistory(db.pool, c.alertId)).filter((h) => h.action === 'shelf_expired')).toHaveLength(1);
  });

  it('unshelve brings it back at once; the rules keep running under a shelf; a closed alert cannot be shelved', async () => {
    const u = await unit();
    const s = settings({ on: 0, off: 0, grade: 0 });
    const [r] = await apply(db.pool, u, [obs(0, [finding('thermocouple_fault', 'warning', { thermocouple: 11 })])], s);
    const wall = new Date();
    await shelveAlert(db.pool, r.alertId, { by: 'shift operator 1', until: new Date(wall.getTime() + 3_600_000), reason: 'known', now: wall });
    const un = await unshelveAlert(db.pool, r.alertId, { by: 'shift operator 2', now: new Date(wall.getTime() + 1000) });
    expect(un!.alert.shelvedUntil).toBeNull();
    expect(un!.change!.action).toBe('unshelved');

    await shelveAlert(db.pool, r.alertId, { by: 'shift operator 1', until: new Date(wall.getTime() + 3_600_000), reason: 'again', now: wall });
    await apply(db.pool, u, [obs(1)], s); // returns to normal while shelved
    let a = (await getAlert(db.pool, r.alertId))!;
    expect(a).toMatchObject({ active: false, closedAt: null });
    expect(a.shelvedUntil).not.toBeNull();
    await acknowledgeAlert(db.pool, r.alertId, { by: 'shift operator 3', now: new Date() });
    a = (await getAlert(db.pool, r.alertId))!;
    expect(a.closedAt).not.toBeNull();
    expect(a.shelvedUntil).toBeNull();
    await expect(shelveAlert(db.pool, r.alertId, { by: 'shift operator 1', until: new Date(Date.now() + 60_000), reason: 'r', now: new Date() })).rejects.toBeInstanceOf(AlertClosedError);
    expect(a.history!.map((h) => h.action)).toEqual(['raised', 'shelved', 'unshelved', 'shelved', 'returned_to_normal', 'acknowledged']);
  });
});

describe('unit_silent', () => {
  it('raised when rings stop for longer than the limit, returned to normal when they resume; a unit that never sent is not judged', async () => {
    const u = await unit();
    const never = await unit();
    const s = settings({ silent: 900 });
    const t0 = new Date(Date.now() - 60_000);
    await ring(u, t0);
    expect((await checkSilentUnits(db.pool, new Date(t0.getTime() + 900_000), s)).filter((c) => c.unitId === u || c.unitId === never)).toEqual([]);
    const silentAt = new Date(t0.getTime() + 901_000);
    const raised = (await checkSilentUnits(db.pool, silentAt, s)).filter((c) => c.unitId === u || c.unitId === never);
    expect(raised.map((c) => [c.unitId, c.kind, c.action, c.grade])).toEqual([[u, 'unit_silent', 'raised', 'warning']]);
    expect((await checkSilentUnits(db.pool, new Date(silentAt.getTime() + 60_000), s)).filter((c) => c.unitId === u)).toEqual([]);
    const a = (await getAlert(db.pool, raised[0].alertId))!;
    expect(a).toMatchObject({ kind: 'unit_silent', active: true, chamber: null, thermocouple: null, evidence: { lastRingTs: t0.toISOString(), lastReceivedAt: t0.toISOString(), silentForS: 901, limitS: 900 } });
    expect(a.message).toContain(u);

    // The finding rules leave unit_silent alone.
    await apply(db.pool, u, [obs(0), obs(1000)], settings({ on: 0, off: 0 }));
    expect((await getAlert(db.pool, a.id))!.active).toBe(true);

    const resumed = new Date(silentAt.getTime() + 120_000);
    await ring(u, resumed);
    const back = (await checkSilentUnits(db.pool, new Date(resumed.getTime() + 1000), s)).filter((c) => c.unitId === u);
    expect(back.map((c) => c.action)).toEqual(['returned_to_normal']);
    // Returned to normal unacknowledged: a second silence reactivates the same alert.
    const again = (await checkSilentUnits(db.pool, new Date(resumed.getTime() + 901_000), s)).filter((c) => c.unitId === u);
    expect(again.map((c) => [c.action, c.alertId])).toEqual([['reactivated', a.id]]);
  });

  it('old rings that have just arrived (a history import catching up) are not silence', async () => {
    const u = await unit();
    const now = new Date();
    await ring(u, new Date(now.getTime() - 30 * 86_400_000), new Date(now.getTime() - 5000));
    expect((await checkSilentUnits(db.pool, now, settings({ silent: 900 }))).filter((c) => c.unitId === u)).toEqual([]);
    const later = (await checkSilentUnits(db.pool, new Date(now.getTime() + 900_000), settings({ silent: 900 }))).filter((c) => c.unitId === u);
    expect(later.map((c) => c.action)).toEqual(['raised']);
  });

  it('is off when the limit is 0', async () => {
    const u = await unit();
    await ring(u, new Date(Date.now() - 86_400_000));
    expect(await checkSilentUnits(db.pool, new Date(), settings({ silent: 0 }))).toEqual([]);
  });
});
