/**
 * Refusals that start below the routes, each through inject and over a real loopback socket
 * (test/helpers/transport.ts): a write PostgreSQL rolls back as a serialization failure must
 * reach the client as the retryable 503 write_conflict (API.md "Errors": nothing stored, retry
 * is safe), an unexpected database error as a 500 naming the request id that the error log
 * line carries, the rate limiter's 429, and the baselines route's own refusals. The database
 * faults are real PostgreSQL errors raised by a trigger on the ring table, not mocks.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS, openPost } from '../helpers/transport.ts';
import { count, ndjson, postBatch, postNdjson, registerUnit, ring } from '../ingest/fixtures.ts';

/** Makes every insert of a ring of `unitId` fail with the given SQLSTATE until dropped. */
async function failRingsOf(t: TestApp, unitId: string, sqlstate: string): Promise<() => Promise<void>> {
  const fn = `fail_${unitId.replace(/-/g, '_')}`;
  await t.db.pool.query(`CREATE FUNCTION ${fn}() RETURNS trigger LANGUAGE plpgsql AS $$
    BEGIN
      IF NEW.unit_id = '${unitId}' THEN RAISE EXCEPTION 'injected fault for ${unitId}' USING ERRCODE = '${sqlstate}'; END IF;
      RETURN NEW;
    END $$`);
  await t.db.pool.query(`CREATE TRIGGER ${fn} BEFORE INSERT ON rings FOR EACH ROW EXECUTE FUNCTION ${fn}()`);
  return async () => {
    await t.db.pool.query(`DROP TRIGGER ${fn} ON rings`);
    await t.db.pool.query(`DROP FUNCTION ${fn}()`);
  };
}

describe.each(TRANSPORTS)('over %s', (transport) => {
  let t: TestApp;
  beforeAll(async () => {
    t = await createTestApp({ transport, captureLog: true, env: { CANSIGHT_INGEST_CHUNK_RINGS: '5' } });
    for (const id of ['wc-1', 'err-1', 'bl-1', 'gone-1']) await registerUnit(t, id);
  });
  afterAll(async () => t?.close());

  it('a serialization failure reaches the client as 503 write_conflict, nothing is stored, and the same request sent again is stored whole', async () => {
    const rings = Array.from({ length: 12 }, (_, i) => ring(i));
    const lines = ndjson(rings.map((r) => ({ unitId: 'wc-1', ...r })));
    const restore = await failRingsOf(t, 'wc-1', '40001');
    const batch = await postBatch(t, 'wc-1', rings);
    expect(batch.statusCode).toBe(503);
    expect(batch.json()).toMatchObject({ error: 'write_conflict', message: expect.stringMatching(/nothing was stored.*Retry/) });
    // A stream fails in its first chunk while the rest of the body is still on its way.
    const stream = await postNdjson(t, lines);
    expect(stream.statusCode).toBe(503);
    expect(stream.json().error).toBe('write_conflict');
    expect(await count(t, 'wc-1')).toBe(0);
    await restore();
    expect((await postBatch(t, 'wc-1', rings)).json()).toMatchObject({ accepted: 12, duplicates: 0 });
    expect((await postNdjson(t, lines)).json()).toMatchObject({ accepted: 0, duplicates: 12 });
    expect(await count(t, 'wc-1')).toBe(12);
  });

  it('an unexpected database error is a 500 naming the request id, logged at error level with that id and no internals in the reply', async () => {
    const restore = await failRingsOf(t, 'err-1', 'XX000');
    try {
      const res = await postBatch(t, 'err-1', [ring(0)]);
      expect(res.statusCode).toBe(500);
      const body = res.json();
      expect(body.error).toBe('internal');
      expect(body.message).not.toContain('injected');
      const id = /logged as request (\S+)\.$/.exec(body.message)?.[1];
      expect(id).toBeTruthy();
      const line = t.log.find((l) => l.reqId === id && l.msg === 'request failed');
      expect(line).toMatchObject({ level: 50, status: 500, error: 'internal' });
      expect(JSON.stringify(line)).toContain('injected fault for err-1');
    } finally {
      await restore();
    }
  });

  it('the baselines route: 400 for a window that does not run forwards or a time that is not one, 401, 403 for a viewer, 404 for an unknown unit', async () => {
    const fit = (payload: object, key = t.keys.admin, unit = 'bl-1') => t.send({ method: 'POST', url: `/v1/units/${unit}/baselines`, headers: bearer(key), payload });
    const backwards = await fit({ from: '2026-03-10T00:00:00Z', to: '2026-03-01T00:00:00Z' });
    expect(backwards.statusCode).toBe(400);
    expect(backwards.json().message).toMatch(/"from" \(2026-03-10T00:00:00Z\) must be before "to"/);
    const notTime = await fit({ from: 'last monday', to: '2026-03-01T00:00:00Z' });
    expect(notTime.statusCode).toBe(400);
    expect(notTime.json().message).toBe('Body field "from": must be an RFC 3339 time with offset, e.g. 2026-03-01T10:00:00Z.');
    expect((await t.send({ method: 'POST', url: '/v1/units/bl-1/baselines', payload: { from: '2026-03-01T00:00:00Z', to: '2026-03-10T00:00:00Z' } })).statusCode).toBe(401);
    expect((await fit({ from: '2026-03-01T00:00:00Z', to: '2026-03-10T00:00:00Z' }, t.keys.viewer)).statusCode).toBe(403);
    const unknown = await fit({ from: '2026-03-01T00:00:00Z', to: '2026-03-10T00:00:00Z' }, t.keys.admin, 'no-such-unit');
    expect(unknown.statusCode).toBe(404);
    expect(unknown.json()).toMatchObject({ error: 'not_found', message: 'No unit no-such-unit.' });
  });

  it('a client that really goes away mid-body is logged as such at info, and nothing is stored', async () => {
    const req = await openPost(t.app, '/v1/rings', { ...bearer(t.keys.ingest), 'content-type': 'application/x-ndjson' });
    req.write(ndjson(Array.from({ length: 3 }, (_, i) => ({ unitId: 'gone-1', ...ring(i) }))));
    const seen = () => t.log.find((l) => typeof l.msg === 'string' && l.msg.startsWith('client closed the connection'));
    await new Promise((r) => setTimeout(r, 100));
    req.destroy();
    for (let i = 0; i < 400 && !seen(); i++) await new Promise((r) => setTimeout(r, 25));
    expect(seen()).toMatchObject({ level: 30, url: '/v1/rings' });
    expect(await count(t, 'gone-1')).toBe(0);
  });
});

describe.each(TRANSPORTS)('rate limit over %s', (transport) => {
  it('answers 429 rate_limited with Retry-After after the limit, for that key only', async () => {
    const limited = await createTestApp({ transport, env: { CANSIGHT_RATE_LIMIT_PER_MIN: '2' } });
    try {
      const call = (key: string) => limited.send({ url: '/v1/units', headers: bearer(key) });
      // A key's first request in this process proves it and counts against the client address.
      expect((await call(limited.keys.viewer)).statusCode).toBe(200);
      for (let i = 0; i < 2; i++) expect((await call(limited.keys.viewer)).statusCode).toBe(200);
      const refused = await call(limited.keys.viewer);
      expect(refused.statusCode).toBe(429);
      expect(refused.json()).toMatchObject({ error: 'rate_limited', message: expect.stringMatching(/retry in/i) });
      expect(refused.headers['retry-after']).toBeDefined();
      expect((await call(limited.keys.admin)).statusCode).toBe(200);
    } finally {
      await limited.close();
    }
  });
});
