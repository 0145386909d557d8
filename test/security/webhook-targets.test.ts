/**
 * Webhook targets are public addresses: loopback, private, link-local (cloud metadata),
 * unique-local, multicast, unspecified and reserved ones are refused when a subscription is
 * made (422 with the reason) and again at delivery, which connects to the address it checked
 * and follows no redirect. (OWASP API Security Top 10 2023, API7 server-side request forgery.)
 * The ranges are those of RFC 1918 (private), RFC 6598 (shared), RFC 3927 (IPv4 link-local),
 * RFC 4291 (IPv6 loopback, link-local, multicast, IPv4-mapped), RFC 4193 (unique-local) and
 * the IANA special-purpose registries (RFC 6890).
 */
import http from 'node:http';
import type { AddressInfo } from 'node:net';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS } from '../helpers/transport.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { addUnit, apply, finding, obs, settings } from '../helpers/alerts.ts';
import { createWebhook, listDeliveries } from '../../services/db/webhooks.ts';
import { deliverDueWebhooks } from '../../services/worker/alert-jobs.ts';
import { checkTarget, parseAllowList, refusedRange } from '../../services/core/webhook-target.ts';

describe('which addresses may receive webhooks', () => {
  it.each([
    ['127.0.0.1', 'loopback'],
    ['127.255.0.9', 'loopback'],
    ['10.20.30.40', 'private (RFC 1918)'],
    ['172.16.0.1', 'private (RFC 1918)'],
    ['172.31.255.254', 'private (RFC 1918)'],
    ['192.168.1.1', 'private (RFC 1918)'],
    ['169.254.169.254', 'link-local'],
    ['100.64.0.1', 'shared address space'],
    ['0.0.0.0', 'unspecified'],
    ['224.0.0.251', 'multicast'],
    ['255.255.255.255', 'reserved or broadcast'],
    ['::1', 'loopback'],
    ['::', 'unspecified'],
    ['fe80::1', 'link-local'],
    ['fd12:3456::1', 'unique-local'],
    ['ff02::1', 'multicast'],
    ['::ffff:127.0.0.1', 'loopback'],
    ['::ffff:7f00:1', 'loopback'],
    ['::ffff:169.254.169.254', 'link-local'],
    ['::ffff:10.0.0.1', 'private (RFC 1918)'],
  ])('refuses %s (%s)', (address, what) => {
    expect(refusedRange(address)).toContain(what);
  });

  it.each(['1.1.1.1', '8.8.4.4', '172.32.0.1', '192.169.0.1', '100.128.0.1', '2606:4700:4700::1111', '::ffff:1.1.1.1'])('takes the public address %s', (address) => {
    expect(refusedRange(address)).toBeNull();
  });

  it('refuses a name when any of its addresses is refused, and lets an allowed host or CIDR through', async () => {
    const lookup = async () => [{ address: '203.0.113.200', family: 4 }, { address: '1.1.1.1', family: 4 }];
    const url = new URL('https://mixed.example.org/hook');
    expect(await checkTarget(url, lookup, parseAllowList([]))).toMatchObject({ ok: false, reason: expect.stringContaining('mixed.example.org (203.0.113.200) is documentation') });
    expect(await checkTarget(url, lookup, parseAllowList(['203.0.113.0/24']))).toEqual({ ok: true, address: '203.0.113.200', family: 4 });
    expect(await checkTarget(url, lookup, parseAllowList(['Mixed.Example.org']))).toMatchObject({ ok: true });
    expect(() => parseAllowList(['10.0.0.0/33'])).toThrow(/10.0.0.0\/33/);
  });
});

describe.each(TRANSPORTS)('subscribing over %s', (transport) => {
  let t: TestApp;
  let allowed: TestApp;
  beforeAll(async () => {
    t = await createTestApp({ transport });
    allowed = await createTestApp({ transport, env: { CANSIGHT_WEBHOOK_ALLOW_HOSTS: '127.0.0.1, ::1' } });
  });
  afterAll(async () => {
    await t.close();
    await allowed.close();
  });
  const subscribe = (app: TestApp, url: string) => app.send({ method: 'POST', url: '/v1/webhooks', headers: bearer(app.keys.admin), payload: { url, minGrade: 'alarm', secret: 'target-check-secret-01' } });

  it.each([
    ['http://127.0.0.1:5432/', 'loopback'],
    ['http://[::1]:8080/', 'loopback'],
    ['http://[::ffff:127.0.0.1]/', 'loopback'],
    ['http://169.254.169.254/latest/meta-data/', 'link-local'],
    ['http://10.0.0.7/hook', 'private'],
    ['http://[fd00::7]/hook', 'unique-local'],
    ['http://localhost:9/hook', 'loopback'],
    ['http://0.0.0.0:80/', 'unspecified'],
  ])('refuses %s with 422 naming it %s', async (url, what) => {
    const r = await subscribe(t, url);
    expect(r.statusCode, r.body).toBe(422);
    expect(r.json()).toMatchObject({ error: 'invalid', details: [{ field: 'url', reason: expect.stringContaining(what) }] });
    expect(r.json().message).toContain('CANSIGHT_WEBHOOK_ALLOW_HOSTS');
  });

  it('takes a loopback receiver that CANSIGHT_WEBHOOK_ALLOW_HOSTS allows', async () => {
    expect((await subscribe(allowed, 'http://127.0.0.1:9/hook')).statusCode).toBe(201);
    expect((await subscribe(allowed, 'http://[::1]:9/hook')).statusCode).toBe(201);
    expect((await subscribe(allowed, 'http://10.0.0.7/hook')).statusCode).toBe(422);
  });
});

describe('delivering', () => {
  let db: TestDatabase;
  let n = 0;
  beforeAll(async () => {
    db = await createTestDatabase();
  });
  afterAll(async () => db.drop());

  /** A receiver on loopback answering `status` (and `location` when given); keeps what reached it. */
  async function receiver(status = 204, location?: string) {
    const got: http.IncomingHttpHeaders[] = [];
    const server = http.createServer((req, res) => {
      got.push(req.headers);
      req.resume();
      req.on('end', () => {
        res.statusCode = status;
        if (location) res.setHeader('location', location);
        res.end();
      });
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    return { got, port: (server.address() as AddressInfo).port, close: () => new Promise<void>((r) => server.close(() => r())) };
  }

  /** One subscription to `url` (written straight to the repository, as an older subscription would be) and one alert raised. */
  async function subscribed(url: string) {
    const unitId = `tgt-${n++}`;
    await addUnit(db.pool, unitId);
    const hook = await createWebhook(db.pool, { url, minGrade: 'warning', secret: 'target-check-secret-01', unitIds: [unitId], createdBy: 'test' });
    return { unitId, hook };
  }

  it('refuses at delivery a target that is no longer allowed, records why, and sends nothing', async () => {
    const up = await receiver();
    try {
      const { unitId, hook } = await subscribed(`http://127.0.0.1:${up.port}/hook`);
      const s = settings({ on: 0 });
      s.webhooks = { ...s.webhooks, allowHosts: parseAllowList([]) };
      await apply(db.pool, unitId, [obs(0, [finding('chamber_cold', 'alarm')])], s);
      const r = await deliverDueWebhooks(db.pool, new Date(Date.now() + 1000), s);
      expect(r.attempted).toBe(1);
      expect(r.delivered).toBe(0);
      expect(up.got).toHaveLength(0);
      const [d] = (await listDeliveries(db.pool, hook.id, { limit: 5 })).deliveries;
      expect(d.error).toMatch(/^refused: 127\.0\.0\.1 is loopback/);
      expect(d.statusCode).toBeNull();
    } finally {
      await up.close();
    }
  });

  it('connects to the address it checked, not to a second lookup, and keeps the host name for the request', async () => {
    const up = await receiver();
    try {
      // The name exists nowhere but in this lookup: a second, system lookup would fail.
      const { unitId, hook } = await subscribed(`http://receiver.invalid:${up.port}/hook`);
      const s = settings({ on: 0 });
      s.webhooks = { ...s.webhooks, allowHosts: parseAllowList(['receiver.invalid']) };
      await apply(db.pool, unitId, [obs(0, [finding('chamber_cold', 'alarm')])], s);
      let asked = 0;
      const lookup = async () => {
        asked++;
        return [{ address: '127.0.0.1', family: 4 }];
      };
      expect((await deliverDueWebhooks(db.pool, new Date(Date.now() + 1000), s, { lookup })).delivered).toBe(1);
      expect(asked).toBe(1);
      expect(up.got).toHaveLength(1);
      expect(up.got[0].host).toBe(`receiver.invalid:${up.port}`);
      expect((await listDeliveries(db.pool, hook.id, { limit: 5 })).deliveries[0].outcome).toBe('delivered');
    } finally {
      await up.close();
    }
  });

  it('does not follow a redirect', async () => {
    const inner = await receiver();
    const outer = await receiver(302, `http://127.0.0.1:${inner.port}/elsewhere`);
    try {
      const { unitId, hook } = await subscribed(`http://127.0.0.1:${outer.port}/hook`);
      const s = settings({ on: 0 });
      await apply(db.pool, unitId, [obs(0, [finding('chamber_cold', 'alarm')])], s);
      expect((await deliverDueWebhooks(db.pool, new Date(Date.now() + 1000), s)).retried).toBe(1);
      expect(outer.got).toHaveLength(1);
      expect(inner.got).toHaveLength(0);
      expect((await listDeliveries(db.pool, hook.id, { limit: 5 })).deliveries[0]).toMatchObject({ statusCode: 302, error: 'HTTP 302' });
    } finally {
      await inner.close();
      await outer.close();
    }
  });
});
