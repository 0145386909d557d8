/**
 * Failed authentication is limited before the key guard runs: requests without a proven key
 * count against the client address, proven keys against themselves, and made-up bearer values
 * can neither exhaust nor reset a real key's count. Over inject and a real socket.
 * (OWASP API Security Top 10 2023, API2 broken authentication and API4 unrestricted resource
 * consumption.)
 */
import { describe, expect, it } from 'vitest';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS } from '../helpers/transport.ts';

/** Counts the key lookups the app sends to PostgreSQL from now on. */
function countKeyLookups(t: TestApp): { readonly n: number } {
  const pool = t.db.pool as unknown as { query: (...a: unknown[]) => unknown };
  const real = pool.query.bind(pool);
  const seen = { n: 0 };
  pool.query = (...a: unknown[]) => {
    if (typeof a[0] === 'string' && a[0].includes('FROM api_keys WHERE key_hash')) seen.n++;
    return real(...a);
  };
  return seen;
}

describe.each(TRANSPORTS)('authentication limit over %s', (transport) => {
  it('answers 429 to a client guessing keys once its address has used its allowance, and asks the database once per wrong key', async () => {
    const t = await createTestApp({ transport, env: { CANSIGHT_RATE_LIMIT_ANON_PER_MIN: '5' } });
    try {
      const lookups = countKeyLookups(t);
      const guess = (v: string) => t.send({ url: '/v1/units', headers: bearer(v) });
      // The same wrong key three times: refused each time, looked up once (the miss is kept).
      for (let i = 0; i < 3; i++) expect((await guess('csk_not-a-key-0000000000')).statusCode).toBe(401);
      expect(lookups.n).toBe(1);
      for (let i = 1; i <= 2; i++) expect((await guess(`csk_not-a-key-${i}`)).statusCode).toBe(401);
      const refused = await guess('csk_not-a-key-3');
      expect(refused.statusCode).toBe(429);
      expect(refused.json()).toMatchObject({ error: 'rate_limited', message: expect.stringMatching(/retry in/i) });
      expect(refused.headers['retry-after']).toBeDefined();
      // Refused before the guard: no lookup for it.
      expect(lookups.n).toBe(3);
      // No key at all counts against the same address.
      expect((await t.send({ url: '/v1/units' })).statusCode).toBe(429);
    } finally {
      await t.close();
    }
  });
});

describe('authentication limit', () => {
  it("keeps a real key's count through a flood of made-up keys", async () => {
    const t = await createTestApp({ env: { CANSIGHT_RATE_LIMIT_PER_MIN: '10', CANSIGHT_RATE_LIMIT_ANON_PER_MIN: '100000', CANSIGHT_RATE_LIMIT_BUCKETS: '50' } });
    try {
      const call = () => t.app.inject({ url: '/v1/units', headers: bearer(t.keys.viewer) });
      await call();
      const before = Number((await call()).headers['x-ratelimit-remaining']);
      expect(before).toBeLessThan(10);
      // More distinct values than the limiter keeps buckets for.
      for (let i = 0; i < 200; i++) {
        const r = await t.app.inject({ url: '/v1/units', headers: bearer(`csk_flood-${i}`) });
        expect(r.statusCode).toBe(401);
      }
      expect(Number((await call()).headers['x-ratelimit-remaining'])).toBe(before - 1);
    } finally {
      await t.close();
    }
  });

  it('counts each forwarded client on its own behind a trusted proxy, and the socket address otherwise', async () => {
    const env = { CANSIGHT_RATE_LIMIT_ANON_PER_MIN: '2' };
    const from = (t: TestApp, client: string) => t.app.inject({ url: '/v1/units', headers: { 'x-forwarded-for': client } });
    const direct = await createTestApp({ env });
    const proxied = await createTestApp({ env: { ...env, CANSIGHT_TRUST_PROXY: 'true' } });
    try {
      const statuses = async (t: TestApp) => [await from(t, '198.51.100.7'), await from(t, '198.51.100.8'), await from(t, '198.51.100.9')].map((r) => r.statusCode);
      // Off by default: the header is ignored, all three come from the same socket address.
      expect(await statuses(direct)).toEqual([401, 401, 429]);
      expect(await statuses(proxied)).toEqual([401, 401, 401]);
      expect((await from(proxied, '198.51.100.7')).statusCode).toBe(401);
      expect((await from(proxied, '198.51.100.7')).statusCode).toBe(429);
    } finally {
      await direct.close();
      await proxied.close();
    }
  });

  it('refuses at registration a route that does not say who may call it', async () => {
    await expect(createTestApp({ routes: [async (app) => void app.get('/v1/forgotten', async () => 'open')] })).rejects.toThrow(/GET \/v1\/forgotten does not say who may call it/);
  });

  it('rejects a CANSIGHT_TRUST_PROXY it cannot read', async () => {
    await expect(createTestApp({ env: { CANSIGHT_TRUST_PROXY: 'the usual one' } })).rejects.toThrow(/CANSIGHT_TRUST_PROXY/);
  });
});
