/**
 * Webhook delivery from the outbox to a real HTTP receiver on 127.0.0.1: down then up,
 * answering 503 then 200, never up; signatures; back-off spacing; several deliverers at once.
 * Time is driven by the `now` passed to the job, never by sleeping.
 */
import { createHmac } from 'node:crypto';
import http from 'node:http';
import type { AddressInfo } from 'node:net';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { addUnit, apply, finding, obs, settings } from '../helpers/alerts.ts';
import { createWebhook, deleteWebhook, listDeliveries, outboxRows } from '../../services/db/webhooks.ts';
import { shelveAlert } from '../../services/db/alert-actions.ts';
import { getAlert } from '../../services/db/alert-reads.ts';
import { backoffDelayS, deliverDueWebhooks, expireShelves, pruneWebhooks } from '../../services/worker/alert-jobs.ts';
import { signBody } from '../../services/db/webhooks.ts';

let db: TestDatabase;
let n = 0;

interface Received {
  headers: http.IncomingHttpHeaders;
  body: string;
}

/** A receiver that answers with `status()` and keeps what it got. */
async function receiver(port = 0, status: () => number = () => 204) {
  const got: Received[] = [];
  const server = http.createServer((req, res) => {
    const chunks: Buffer[] = [];
    req.on('data', (c) => chunks.push(c));
    req.on('end', () => {
      got.push({ headers: req.headers, body: Buffer.concat(chunks).toString('utf8') });
      res.statusCode = status();
      res.end();
    });
  });
  await new Promise<void>((resolve) => server.listen(port, '127.0.0.1', resolve));
  return {
    got,
    port: (server.address() as AddressInfo).port,
    close: () => new Promise<void>((resolve) => server.close(() => resolve())),
  };
}

/** A port nothing listens on (taken and released). */
async function freePort(): Promise<number> {
  const r = await receiver();
  await r.close();
  return r.port;
}

const SECRET = 'receiver-secret-0123456789';

/** A unit with one subscription and one raised alert: one outbox row. */
async function setup(port: number, o: { tries?: number; base?: number; max?: number } = {}) {
  const unitId = `wh-${n++}`;
  await addUnit(db.pool, unitId);
  const hook = await createWebhook(db.pool, { url: `http://127.0.0.1:${port}/cansight`, minGrade: 'warning', secret: SECRET, unitIds: [unitId], createdBy: 'test' });
  const s = settings({ on: 0, tries: o.tries ?? 6, base: o.base ?? 10, max: o.max ?? 3600 });
  const [raised] = await apply(db.pool, unitId, [obs(0, [finding('chamber_cold', 'alarm')])], s);
  const rows = await outboxRows(db.pool, { webhookId: hook.id });
  expect(rows).toHaveLength(1);
  return { unitId, hook, s, raised, outboxId: rows[0].id };
}

const row = async (webhookId: string) => (await outboxRows(db.pool, { webhookId }))[0];

beforeAll(async () => {
  db = await createTestDatabase();
});
afterAll(async () => db.drop());

describe('webhook delivery', () => {
  it('receiver down (connection refused) then up on the same port: delivered exactly once, signed, retries spaced by the back-off', async () => {
    const port = await freePort();
    const { hook, s, raised } = await setup(port, { base: 10 });
    let now = new Date(Date.now() + 1000);
    const spacing: Array<{ attempt: number; waitedS: number; capS: number }> = [];
    for (let attempt = 1; attempt <= 3; attempt++) {
      const r = await deliverDueWebhooks(db.pool, now, s);
      expect(r).toEqual({ attempted: 1, delivered: 0, retried: 1, dead: 0 });
      const o = await row(hook.id);
      expect(o).toMatchObject({ state: 'pending', attempts: attempt });
      spacing.push({ attempt, waitedS: (o.nextAttemptAt.getTime() - now.getTime()) / 1000, capS: 10 * 2 ** (attempt - 1) });
      // Not due a moment before its time.
      expect((await deliverDueWebhooks(db.pool, new Date(o.nextAttemptAt.getTime() - 1), s)).attempted).toBe(0);
      now = o.nextAttemptAt;
    }
    for (const sp of spacing) {
      expect(sp.waitedS).toBeGreaterThanOrEqual(0);
      expect(sp.waitedS).toBeLessThanOrEqual(sp.capS);
    }

    const up = await receiver(port);
    try {
      expect(await deliverDueWebhooks(db.pool, now, s)).toEqual({ attempted: 1, delivered: 1, retried: 0, dead: 0 });
      expect(await deliverDueWebhooks(db.pool, new Date(now.getTime() + 86_400_000), s)).toEqual({ attempted: 0, delivered: 0, retried: 0, dead: 0 });
      expect(up.got).toHaveLength(1);
      const req = up.got[0];
      // The receiver's check, as the OpenAPI document gives it: HMAC over "<timestamp>.<body>".
      const expected = 'sha256=' + createHmac('sha256', SECRET).update(`${req.headers['x-cansight-timestamp']}.${req.body}`).digest('hex');
      expect(req.headers['x-cansight-signature']).toBe(expected);
      expect(signBody(SECRET, String(req.headers['x-cansight-timestamp']), req.body)).toBe(expected);
      expect(req.headers['x-cansight-timestamp']).toBe(now.toISOString());
      expect(req.headers['x-cansight-attempt']).toBe('4');
      expect(req.headers['content-type']).toBe('application/json');
      const body = JSON.parse(req.body);
      expect(body).toMatchObject({ event: 'raised', grade: 'alarm', alert: { id: raised.alertId, kind: 'chamber_cold', chamber: 4 } });
      expect(body.caution).toMatch(/does not protect/);
      const o = await row(hook.id);
      expect(o.state).toBe('delivered');
      const log = (await listDeliveries(db.pool, hook.id, { limit: 50 })).deliveries.reverse();
      expect(log.map((d) => [d.attempt, d.outcome, d.statusCode])).toEqual([[1, 'retry', null], [2, 'retry', null], [3, 'retry', null], [4, 'delivered', 204]]);
      expect(log[0].error).toBe('connection refused');
    } finally {
      await up.close();
    }
  });

  it('receiver answering 503 then 200: delivered once, every answer logged', async () => {
    const answers = [503, 503, 200];
    const up = await receiver(0, () => answers.shift() ?? 200);
    try {
      const { hook, s } = await setup(up.port);
      let now = new Date(Date.now() + 1000);
      for (let i = 0; i < 3; i++) {
        await deliverDueWebhooks(db.pool, now, s);
        now = (await row(hook.id)).nextAttemptAt;
      }
      expect((await deliverDueWebhooks(db.pool, new Date(now.getTime() + 86_400_000), s)).attempted).toBe(0);
      expect(up.got).toHaveLength(3);
      expect(new Set(up.got.map((g) => g.body)).size).toBe(1);
      expect(new Set(up.got.map((g) => g.headers['x-cansight-delivery'])).size).toBe(1);
      const log = (await listDeliveries(db.pool, hook.id, { limit: 50 })).deliveries.reverse();
      expect(log.map((d) => [d.outcome, d.statusCode, d.error])).toEqual([['retry', 503, 'HTTP 503'], ['retry', 503, 'HTTP 503'], ['delivered', 200, null]]);
      expect((await row(hook.id)).state).toBe('delivered');
    } finally {
      await up.close();
    }
  });

  it('receiver never up: dead-lettered after the configured tries, with the delivery log complete', async () => {
    const port = await freePort();
    const { hook, s } = await setup(port, { tries: 4, base: 1, max: 2 });
    let now = new Date(Date.now() + 1000);
    const outcomes: string[] = [];
    for (let i = 0; i < 10; i++) {
      const r = await deliverDueWebhooks(db.pool, now, s);
      if (r.attempted === 0) break;
      outcomes.push(r.dead ? 'dead' : 'retry');
      const o = await row(hook.id);
      if (r.retried) expect(o.nextAttemptAt.getTime() - now.getTime()).toBeLessThanOrEqual(2000);
      now = new Date(Math.max(o.nextAttemptAt.getTime(), now.getTime()) + 1);
    }
    expect(outcomes).toEqual(['retry', 'retry', 'retry', 'dead']);
    const o = await row(hook.id);
    expect(o).toMatchObject({ state: 'dead', attempts: 4 });
    expect(o.lastError).toBe('connection refused');
    const log = (await listDeliveries(db.pool, hook.id, { limit: 50 })).deliveries.reverse();
    expect(log.map((d) => [d.attempt, d.outcome])).toEqual([[1, 'retry'], [2, 'retry'], [3, 'retry'], [4, 'dead']]);
    expect(log.every((d) => d.statusCode === null && d.error !== null)).toBe(true);
    expect((await deliverDueWebhooks(db.pool, new Date(now.getTime() + 86_400_000), s)).attempted).toBe(0);
  });

  it('back-off: full jitter under a cap that doubles per attempt and stops at the maximum', () => {
    const w = { backoffBaseS: 10, backoffMaxS: 300 };
    expect(backoffDelayS(1, w, () => 0)).toBe(0);
    expect(backoffDelayS(1, w, () => 0.999999)).toBeCloseTo(10, 3);
    expect(backoffDelayS(3, w, () => 0.5)).toBe(20);
    expect(backoffDelayS(10, w, () => 0.5)).toBe(150);
  });

  it('two deliverers working the same outbox at once deliver each event exactly once', async () => {
    const up = await receiver(0, () => 200);
    try {
      const unitId = `wh-${n++}`;
      await addUnit(db.pool, unitId);
      const hook = await createWebhook(db.pool, { url: `http://127.0.0.1:${up.port}/x`, minGrade: 'notice', secret: SECRET, unitIds: [unitId], createdBy: 'test' });
      const s = settings({ on: 0, off: 0, grade: 0 });
      s.webhooks.batchSize = 3;
      // 12 changes: raised/returned to normal on six chambers.
      const fs = [1, 2, 3, 4, 5, 6].map((c) => finding('chamber_hot', 'warning', { chamber: c }));
      await apply(db.pool, unitId, [obs(0, fs), obs(1)], s);
      expect(await outboxRows(db.pool, { webhookId: hook.id })).toHaveLength(12);
      const now = new Date(Date.now() + 1000);
      for (let round = 0; round < 10; round++) {
        const [a, b] = await Promise.all([deliverDueWebhooks(db.pool, now, s), deliverDueWebhooks(db.pool, now, s)]);
        if (a.attempted + b.attempted === 0) break;
      }
      const ids = up.got.map((g) => g.headers['x-cansight-delivery']);
      expect(ids).toHaveLength(12);
      expect(new Set(ids).size).toBe(12);
      expect((await outboxRows(db.pool, { webhookId: hook.id })).every((o) => o.state === 'delivered')).toBe(true);
    } finally {
      await up.close();
    }
  });

  it('deleting a subscription cancels what it has not delivered; its log stays readable', async () => {
    const port = await freePort();
    const { hook, s } = await setup(port);
    await deliverDueWebhooks(db.pool, new Date(Date.now() + 1000), s);
    expect(await deleteWebhook(db.pool, hook.id)).toBe(true);
    expect(await deleteWebhook(db.pool, hook.id)).toBe(false);
    expect((await row(hook.id)).state).toBe('cancelled');
    expect((await deliverDueWebhooks(db.pool, new Date(Date.now() + 86_400_000), s)).attempted).toBe(0);
    expect((await listDeliveries(db.pool, hook.id, { limit: 10 })).deliveries).toHaveLength(1);
  });

  it('finished rows and their log are pruned after the keeping time; pending ones stay', async () => {
    const up = await receiver(0, () => 200);
    try {
      const done = await setup(up.port);
      await deliverDueWebhooks(db.pool, new Date(Date.now() + 1000), done.s);
      const waiting = await setup(await freePort());
      const keep = { webhooks: { ...done.s.webhooks, keepDays: 30 } };
      expect(await pruneWebhooks(db.pool, new Date(Date.now() + 29 * 86_400_000), keep)).toBe(0);
      expect(await pruneWebhooks(db.pool, new Date(Date.now() + 31 * 86_400_000), keep)).toBeGreaterThanOrEqual(1);
      expect(await outboxRows(db.pool, { webhookId: done.hook.id })).toEqual([]);
      expect((await listDeliveries(db.pool, done.hook.id, { limit: 10 })).deliveries).toEqual([]);
      expect(await outboxRows(db.pool, { webhookId: waiting.hook.id })).toHaveLength(1);
    } finally {
      await up.close();
    }
  });

  // A rise to alarm or critical takes an alert off its shelf instead (test/security/shelved-escalation.test.ts).
  it('a shelved alert sends nothing for a fall in grade or its return to normal; the end of its shelf is sent', async () => {
    const port = await freePort();
    const { unitId, hook, raised } = await setup(port);
    const s = settings({ on: 0, off: 0, grade: 0 });
    const wall = new Date();
    await shelveAlert(db.pool, raised.alertId, { by: 'shift operator 1', until: new Date(wall.getTime() + 3_600_000), reason: 'nozzle change planned', now: wall });
    await apply(db.pool, unitId, [obs(1, [finding('chamber_cold', 'warning')]), obs(2)], s);
    expect((await getAlert(db.pool, raised.alertId))!.history!.map((h) => h.action)).toEqual(['raised', 'shelved', 'deescalated', 'returned_to_normal']);
    await expireShelves(db.pool, new Date(wall.getTime() + 3_600_001));
    expect((await outboxRows(db.pool, { webhookId: hook.id })).map((o) => o.event)).toEqual(['raised', 'shelved', 'shelf_expired']);
  });
});
