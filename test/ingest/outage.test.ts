/**
 * The database stops while a stream is being stored: the request gets 503, nothing of it is
 * stored, and once the database is back the same request succeeds with exact counts. Runs on
 * its own embedded PostgreSQL (not the shared test server, which it must not stop).
 */
import http from 'node:http';
import net from 'node:net';
import { chmod, mkdtemp, rm } from 'node:fs/promises';
import type { AddressInfo } from 'node:net';
import os from 'node:os';
import path from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../services/cli/app.ts';
import { loadConfig } from '../../services/db/config.ts';
import { startEmbeddedPostgres, type EmbeddedServer } from '../../services/db/embedded.ts';
import { createKeysRepository } from '../../services/db/keys.ts';
import { createLogger } from '../../services/db/logger.ts';
import { migrate } from '../../services/db/migrate.ts';
import { createPool, type Pool } from '../../services/db/pool.ts';
import { countRings } from '../../services/db/rings.ts';
import { createUnitsRepository } from '../../services/db/units.ts';
import { unitBody } from '../helpers/app.ts';
import { ndjson, ring } from './fixtures.ts';

const logger = createLogger(process.env.TEST_LOG_LEVEL ?? 'silent');
let dir: string;
let dataDir: string;
let server: EmbeddedServer;
let pool: Pool;
let app: FastifyInstance;
let port: number;
let key: string;

beforeAll(async () => {
  dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-outage-'));
  await chmod(dir, 0o777);
  dataDir = path.join(dir, 'data');
  server = await startEmbeddedPostgres({ dataDir, preferredPort: 0, logger });
  pool = createPool(server.url, { max: 4, logger });
  await migrate(pool, logger);
  const { id, name, site, ...config } = unitBody('out-1');
  await createUnitsRepository(pool).create({ id, name, site }, config as never, 'test');
  key = (await createKeysRepository(pool).create('ingest', null)).key;
  app = await buildApp({
    config: loadConfig({ LOG_LEVEL: 'silent', CANSIGHT_INGEST_CHUNK_RINGS: '10' }),
    pool,
    logger,
    parts: { api: false, ingest: true },
  });
  await app.listen({ host: '127.0.0.1', port: 0 });
  port = (app.server.address() as AddressInfo).port;
}, 180_000);

afterAll(async () => {
  await app?.close();
  await pool?.end().catch(() => undefined);
  await server?.stop();
  if (dir) await rm(dir, { recursive: true, force: true });
});

/** The stopped server's process may hold its port a moment longer; the pool must find it there again. */
async function portReleased(p: number): Promise<void> {
  for (let i = 0; i < 400; i++) {
    const free = await new Promise<boolean>((resolve) => {
      const srv = net.createServer();
      srv.once('error', () => resolve(false));
      srv.listen(p, '127.0.0.1', () => srv.close(() => resolve(true)));
    });
    if (free) return;
    await new Promise((r) => setTimeout(r, 25));
  }
  throw new Error(`port ${p} stayed taken`);
}

function send(parts: string[], between: () => Promise<void>): Promise<{ status: number; body: Record<string, unknown> }> {
  return new Promise((resolve, reject) => {
    const req = http.request({ host: '127.0.0.1', port, method: 'POST', path: '/v1/rings', headers: { authorization: `Bearer ${key}`, 'content-type': 'application/x-ndjson' } }, (res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (c) => (text += c));
      res.on('end', () => resolve({ status: res.statusCode ?? 0, body: JSON.parse(text) }));
    });
    req.on('error', reject);
    req.write(parts[0]);
    between()
      .then(() => {
        req.end(parts[1]);
      })
      .catch(reject);
  });
}

describe('database stopped mid-request', () => {
  it('answers 503, stores nothing, and the retry after restart stores every ring exactly once', async () => {
    const rings = Array.from({ length: 60 }, (_, i) => ({ unitId: 'out-1', ...ring(i) }));
    const firstHalf = ndjson(rings.slice(0, 35));
    const secondHalf = ndjson(rings.slice(35));
    const watcher = createPool(server.url, { max: 1 });
    const failed = await send([firstHalf, secondHalf], async () => {
      // Wait until the first chunks sit in the request's open transaction, then stop the server.
      for (let i = 0; i < 400; i++) {
        const { rows } = await watcher.query(`SELECT count(*)::int AS n FROM pg_stat_activity WHERE state = 'idle in transaction'`);
        if (rows[0].n > 0) break;
        await new Promise((r) => setTimeout(r, 25));
      }
      await watcher.end();
      await server.stop();
    });
    expect(failed.status).toBe(503);
    expect(failed.body).toMatchObject({ error: 'database_unavailable', message: expect.stringMatching(/nothing was stored/i) });

    // While it is down, a new request is refused the same way.
    const down = await send([ndjson(rings.slice(0, 1)), ''], async () => undefined);
    expect(down.status).toBe(503);

    const oldPort = Number(new URL(server.url).port);
    await portReleased(oldPort);
    server = await startEmbeddedPostgres({ dataDir, preferredPort: oldPort, logger });
    expect(server.port).toBe(oldPort);
    expect(await countRings(pool, 'out-1')).toBe(0);

    const retry = await send([firstHalf, secondHalf], async () => undefined);
    expect(retry.status).toBe(200);
    expect(retry.body).toMatchObject({ accepted: 60, duplicates: 0, rejectedCount: 0 });
    const again = await send([firstHalf, secondHalf], async () => undefined);
    expect(again.body).toMatchObject({ accepted: 0, duplicates: 60 });
    expect(await countRings(pool, 'out-1')).toBe(60);
  });
});
