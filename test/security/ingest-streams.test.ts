/**
 * Ring streams cannot take the service's connections: a key may hold only so many open at
 * once, and all keys together leave part of the pool for reads and the worker; a stream that
 * stops sending is ended with 408 and nothing of it is kept. Over a real socket, with streams
 * left open the way a slow or hostile client leaves them. (OWASP API Security Top 10 2023,
 * API4 unrestricted resource consumption.)
 */
import type { ClientRequest, IncomingMessage } from 'node:http';
import { describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { openPost } from '../helpers/transport.ts';

const NDJSON = { 'content-type': 'application/x-ndjson' };

function line(unitId: string, i: number): string {
  const ring = { unitId, ts: new Date(Date.UTC(2026, 1, 1) + i * 60_000).toISOString(), loadMw: 20, ambientC: 15, ambientKPa: 101.3, speedPct: 100, exhaustC: Array.from({ length: 18 }, () => 540) };
  return JSON.stringify(ring) + '\n';
}

/** The reply of a request sent with openPost: status, headers and parsed body. */
function replyOf(req: ClientRequest): Promise<{ status: number; headers: IncomingMessage['headers']; body: { error?: string; message?: string; accepted?: number } }> {
  return new Promise((resolve, reject) => {
    req.on('response', (res) => {
      const chunks: Buffer[] = [];
      res.on('data', (c) => chunks.push(c));
      res.on('end', () => resolve({ status: res.statusCode ?? 0, headers: res.headers, body: JSON.parse(Buffer.concat(chunks).toString('utf8') || '{}') }));
    });
    req.on('error', reject);
  });
}

async function app(env: Record<string, string>): Promise<TestApp> {
  const t = await createTestApp({ transport: 'socket', env });
  expect((await t.send({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('strm-1') })).statusCode).toBe(201);
  return t;
}

const stored = async (t: TestApp) => (await t.db.pool.query(`SELECT count(*)::int AS n FROM rings WHERE unit_id = 'strm-1'`)).rows[0].n as number;

describe('ring streams', () => {
  it('a key may hold only so many open at once; the next gets 429 with Retry-After, another key is served', async () => {
    const t = await app({ CANSIGHT_INGEST_MAX_STREAMS_PER_KEY: '2' });
    try {
      const held = await Promise.all([0, 1].map(() => openPost(t.app, '/v1/rings', { ...bearer(t.keys.ingest), ...NDJSON })));
      held.forEach((req, k) => req.write(line('strm-1', k)));
      await new Promise((r) => setTimeout(r, 200));
      const third = await t.send({ method: 'POST', url: '/v1/rings', headers: { ...bearer(t.keys.ingest), ...NDJSON }, payload: line('strm-1', 10) });
      expect(third.statusCode).toBe(429);
      expect(third.json()).toMatchObject({ error: 'rate_limited', message: expect.stringContaining('CANSIGHT_INGEST_MAX_STREAMS_PER_KEY') });
      expect(third.headers['retry-after']).toBe('1');
      const other = await t.send({ method: 'POST', url: '/v1/rings', headers: { ...bearer(t.keys.admin), ...NDJSON }, payload: line('strm-1', 11) });
      expect(other.statusCode, other.body).toBe(200);
      const replies = held.map(replyOf);
      held.forEach((req) => req.end());
      expect((await Promise.all(replies)).map((r) => r.status)).toEqual([200, 200]);
      // The places are given back when the streams end.
      expect((await t.send({ method: 'POST', url: '/v1/rings', headers: { ...bearer(t.keys.ingest), ...NDJSON }, payload: line('strm-1', 12) })).statusCode).toBe(200);
      expect(await stored(t)).toBe(4);
    } finally {
      await t.close();
    }
  });

  it('leaves connections for reads: with every stream place taken, the API still answers', async () => {
    // A pool of 4 leaves 1 stream place (4 − 3 kept for the rest); each stream writes at once (1 ring per chunk).
    const t = await app({ CANSIGHT_POOL_MAX: '4', CANSIGHT_INGEST_CHUNK_RINGS: '1', CANSIGHT_INGEST_MAX_STREAMS_PER_KEY: '10' });
    try {
      const held = await Promise.all([0, 1, 2, 3].map(() => openPost(t.app, '/v1/rings', { ...bearer(t.keys.ingest), ...NDJSON })));
      const replies = held.map(replyOf);
      held.forEach((req, k) => req.write(line('strm-1', 20 + 2 * k) + line('strm-1', 21 + 2 * k)));
      await new Promise((r) => setTimeout(r, 300));
      const read = await Promise.race([t.send({ url: '/v1/units', headers: bearer(t.keys.viewer) }), new Promise<null>((r) => setTimeout(() => r(null), 5000))]);
      expect(read?.statusCode).toBe(200);
      held.forEach((req) => req.end());
      const statuses = (await Promise.all(replies)).map((r) => r.status).sort();
      expect(statuses).toEqual([200, 429, 429, 429]);
    } finally {
      await t.close();
    }
  });

  it('ends a stream that stops sending with 408, and keeps nothing of it', async () => {
    const t = await app({ CANSIGHT_INGEST_STREAM_IDLE_S: '1' });
    try {
      const req = await openPost(t.app, '/v1/rings', { ...bearer(t.keys.ingest), ...NDJSON });
      const reply = replyOf(req);
      req.write(line('strm-1', 30) + line('strm-1', 31));
      const r = await reply;
      expect(r.status).toBe(408);
      expect(r.body).toMatchObject({ error: 'request_timeout', message: expect.stringContaining('no byte for 1 s') });
      req.destroy();
      expect(await stored(t)).toBe(0);
    } finally {
      await t.close();
    }
  });
});
