/**
 * The auth matrix: every /v1 route × no key, unknown key, revoked key, wrong role, key scoped
 * to another unit, right key. A route added to the API without a row here fails the last test.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import type { Role } from '../../services/db/keys.ts';
import { createKeysRepository } from '../../services/db/keys.ts';
import { AUTH_ALERT_ID, AUTH_WEBHOOK_ID, seedAuthFixtures } from '../helpers/alerts.ts';
import { AUTH_START_ID, seedStart } from '../starts/fixtures.ts';

let t: TestApp;
beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('auth-a', { family: 'auth-family' }) });
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('auth-b') });
  await seedAuthFixtures(t.db.pool);
  await seedStart(t.db.pool, 'auth-a');
  await t.db.pool.query(`INSERT INTO maintenance_events (unit_id, id, kind, at, recorded_by) VALUES ('auth-a', $1, 'compressor_wash', '2026-01-01T00:00:00Z', 'auth matrix')`, [AUTH_EVENT_ID]);
});
const AUTH_EVENT_ID = '6f1d2c3b-0000-4000-8000-0000000000ee';
afterAll(async () => t.close());

interface RouteCase {
  method: 'GET' | 'POST' | 'PATCH' | 'DELETE';
  url: string;
  /** OpenAPI path this case covers. */
  path: string;
  allowed: Role[];
  payload?: () => object | string;
  contentType?: string;
  unitScoped: boolean;
  /** The URL names an alert, not a unit: a key scoped elsewhere gets 404, as for an unknown alert. */
  hidesOutOfScope?: boolean;
}

let n = 0;
/** A valid ring for unit auth-a (18 thermocouples), a minute apart per call. */
function authRing(i: number) {
  return { ts: new Date(Date.UTC(2026, 0, 1) + i * 60_000).toISOString(), loadMw: 20, ambientC: 15, ambientKPa: 101.3, speedPct: 100, exhaustC: Array.from({ length: 18 }, () => 540) };
}
export const ROUTES: RouteCase[] = [
  { method: 'GET', url: '/v1/units', path: '/v1/units', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'POST', url: '/v1/units', path: '/v1/units', allowed: ['admin'], payload: () => unitBody(`auth-new-${n++}`), unitScoped: false },
  { method: 'GET', url: '/v1/units/auth-a', path: '/v1/units/{unitId}', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'PATCH', url: '/v1/units/auth-a', path: '/v1/units/{unitId}', allowed: ['admin'], payload: () => ({ name: `renamed ${n++}` }), unitScoped: true },
  { method: 'GET', url: '/v1/alerts?unitId=auth-a', path: '/v1/alerts', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: `/v1/alerts/${AUTH_ALERT_ID}`, path: '/v1/alerts/{id}', allowed: ['viewer', 'operator', 'admin'], unitScoped: true, hidesOutOfScope: true },
  { method: 'POST', url: `/v1/alerts/${AUTH_ALERT_ID}/ack`, path: '/v1/alerts/{id}/ack', allowed: ['operator', 'admin'], payload: () => ({ by: 'shift operator 1' }), unitScoped: true, hidesOutOfScope: true },
  { method: 'POST', url: `/v1/alerts/${AUTH_ALERT_ID}/shelve`, path: '/v1/alerts/{id}/shelve', allowed: ['operator', 'admin'], payload: () => ({ by: 'shift operator 1', until: new Date(Date.now() + 3_600_000).toISOString(), reason: 'auth matrix' }), unitScoped: true, hidesOutOfScope: true },
  { method: 'POST', url: `/v1/alerts/${AUTH_ALERT_ID}/unshelve`, path: '/v1/alerts/{id}/unshelve', allowed: ['operator', 'admin'], payload: () => ({ by: 'shift operator 1' }), unitScoped: true, hidesOutOfScope: true },
  { method: 'POST', url: '/v1/webhooks', path: '/v1/webhooks', allowed: ['admin'], payload: () => ({ url: `https://receiver.example.net/${n++}`, minGrade: 'alarm', secret: 'auth-matrix-secret-0000' }), unitScoped: false },
  { method: 'GET', url: '/v1/webhooks', path: '/v1/webhooks', allowed: ['admin'], unitScoped: false },
  { method: 'GET', url: `/v1/webhooks/${AUTH_WEBHOOK_ID}/deliveries`, path: '/v1/webhooks/{id}/deliveries', allowed: ['admin'], unitScoped: false },
  { method: 'DELETE', url: `/v1/webhooks/${AUTH_WEBHOOK_ID}`, path: '/v1/webhooks/{id}', allowed: ['admin'], unitScoped: false },
  { method: 'POST', url: '/v1/units/auth-a/rings', path: '/v1/units/{unitId}/rings', allowed: ['ingest', 'admin'], payload: () => ({ rings: [authRing(n++)] }), unitScoped: true },
  { method: 'POST', url: '/v1/rings', path: '/v1/rings', allowed: ['ingest', 'admin'], contentType: 'application/x-ndjson', payload: () => JSON.stringify({ unitId: 'auth-a', ...authRing(n++) }) + '\n', unitScoped: false },
  { method: 'GET', url: '/v1/units/auth-a/status', path: '/v1/units/{unitId}/status', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/baselines', path: '/v1/units/{unitId}/baselines', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'POST', url: '/v1/units/auth-a/baselines', path: '/v1/units/{unitId}/baselines', allowed: ['admin'], payload: () => ({ from: '2026-01-01T00:00:00Z', to: '2026-01-15T00:00:00Z' }), unitScoped: true },
  { method: 'GET', url: '/v1/whoami', path: '/v1/whoami', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'GET', url: '/v1/fleet', path: '/v1/fleet', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'GET', url: '/v1/fleet.svg', path: '/v1/fleet.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'GET', url: '/v1/units/auth-a/analysis?every=1h', path: '/v1/units/{unitId}/analysis', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/chambers', path: '/v1/units/{unitId}/chambers', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/chambers/2/trend', path: '/v1/units/{unitId}/chambers/{chamber}/trend', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/thermocouples', path: '/v1/units/{unitId}/thermocouples', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'POST', url: '/v1/units/auth-a/swirl/calibrate', path: '/v1/units/{unitId}/swirl/calibrate', allowed: ['viewer', 'operator', 'admin'], payload: () => ({ from: '2026-01-01T00:00:00Z', to: '2026-01-02T00:00:00Z', chamber: 1 }), unitScoped: true },
  { method: 'POST', url: '/v1/units/auth-a/swirl/what-if', path: '/v1/units/{unitId}/swirl/what-if', allowed: ['viewer', 'operator', 'admin'], payload: () => ({ from: '2026-01-01T00:00:00Z', to: '2026-01-02T00:00:00Z', curve: [[0.3, 100], [1.0, 60]] }), unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/ring.svg', path: '/v1/units/{unitId}/ring.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/chambers/2/trend.svg', path: '/v1/units/{unitId}/chambers/{chamber}/trend.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/spread.svg', path: '/v1/units/{unitId}/spread.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/review', path: '/v1/units/{unitId}/review', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/starts', path: '/v1/units/{unitId}/starts', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/starts/trend.svg', path: '/v1/units/{unitId}/starts/trend.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: `/v1/units/auth-a/starts/${AUTH_START_ID}`, path: '/v1/units/{unitId}/starts/{startId}', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'POST', url: `/v1/alerts/${AUTH_ALERT_ID}/outcome`, path: '/v1/alerts/{id}/outcome', allowed: ['operator', 'admin'], payload: () => ({ by: 'combustion engineer', outcome: 'not_inspected' }), unitScoped: true, hidesOutOfScope: true },
  { method: 'GET', url: '/v1/units/auth-a/outcomes', path: '/v1/units/{unitId}/outcomes', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  { method: 'GET', url: '/v1/fleet/outcomes', path: '/v1/fleet/outcomes', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'GET', url: '/v1/fleet/families/auth-family', path: '/v1/fleet/families/{family}', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'GET', url: '/v1/fleet/families/auth-family/family.svg', path: '/v1/fleet/families/{family}/family.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: false },
  { method: 'POST', url: '/v1/units/auth-a/events', path: '/v1/units/{unitId}/events', allowed: ['operator', 'admin'], payload: () => ({ kind: 'compressor_wash', at: '2026-01-02T00:00:00Z', by: 'shift operator 1' }), unitScoped: true },
  { method: 'GET', url: '/v1/units/auth-a/events', path: '/v1/units/{unitId}/events', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
  // Deleting succeeds once, so this row is not run again with a key scoped to auth-a (the guard is the one every :unitId route has).
  { method: 'DELETE', url: `/v1/units/auth-a/events/${AUTH_EVENT_ID}`, path: '/v1/units/{unitId}/events/{eventId}', allowed: ['admin'], unitScoped: false },
  { method: 'GET', url: `/v1/units/auth-a/starts/${AUTH_START_ID}/start.svg`, path: '/v1/units/{unitId}/starts/{startId}/start.svg', allowed: ['viewer', 'operator', 'admin'], unitScoped: true },
];

const ALL_ROLES: Role[] = ['ingest', 'viewer', 'operator', 'admin'];

describe('auth matrix', () => {
  for (const r of ROUTES) {
    const call = (headers: Record<string, string>) =>
      t.app.inject({ method: r.method, url: r.url, headers: r.contentType ? { ...headers, 'content-type': r.contentType } : headers, ...(r.payload ? { payload: r.payload() } : {}) });

    it(`${r.method} ${r.url}: 401 without a key, with an unknown key, with a revoked key`, async () => {
      const none = await call({});
      expect(none.statusCode).toBe(401);
      expect(none.json().error).toBe('unauthorized');
      expect((await call(bearer('csk_not-a-real-key'))).statusCode).toBe(401);
      expect((await call({ authorization: 'Basic abc' })).statusCode).toBe(401);
      const repo = createKeysRepository(t.db.pool);
      const { key, record } = await repo.create('admin', null);
      await repo.revoke(record.id);
      expect((await call(bearer(key))).statusCode).toBe(401);
    });

    it(`${r.method} ${r.url}: roles ${r.allowed.join('/')} pass, others get 403`, async () => {
      for (const role of ALL_ROLES) {
        const res = await call(bearer(t.keys[role]));
        if (r.allowed.includes(role)) expect(res.statusCode, `${role}: ${res.body}`).toBeLessThan(300);
        else {
          expect(res.statusCode, role).toBe(403);
          expect(res.json().error).toBe('forbidden');
        }
      }
    });

    if (r.unitScoped) {
      it(`${r.method} ${r.url}: a key scoped to another unit gets ${r.hidesOutOfScope ? 404 : 403}, one scoped to this unit passes`, async () => {
        const role = r.allowed[0];
        const other = await t.key(role, ['auth-b']);
        const res = await call(bearer(other));
        if (r.hidesOutOfScope) {
          expect(res.statusCode).toBe(404);
          expect(res.json().message).not.toContain('auth-a');
        } else {
          expect(res.statusCode).toBe(403);
          expect(res.json().message).toContain('auth-a');
        }
        const own = await t.key(role, ['auth-a']);
        expect((await call(bearer(own))).statusCode).toBeLessThan(300);
      });
    }
  }

  it('health and readiness need no key', async () => {
    expect((await t.app.inject({ url: '/health' })).statusCode).toBe(200);
    expect((await t.app.inject({ url: '/ready' })).statusCode).toBe(200);
  });

  it('every /v1 route of the OpenAPI document has a row in this matrix', async () => {
    const doc = (await t.app.inject({ url: '/openapi.json' })).json() as { paths: Record<string, Record<string, unknown>> };
    const covered = new Set(ROUTES.map((r) => `${r.method} ${r.path}`));
    const missing: string[] = [];
    for (const [p, ops] of Object.entries(doc.paths)) {
      if (!p.startsWith('/v1/')) continue;
      for (const m of Object.keys(ops)) if (!covered.has(`${m.toUpperCase()} ${p}`)) missing.push(`${m.toUpperCase()} ${p}`);
    }
    expect(missing).toEqual([]);
  });
});
