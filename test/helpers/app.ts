/**
 * A Cansight HTTP application on a fresh test database, with keys of each role ready.
 * Requests go through app.inject (no socket) unless a test calls app.listen itself.
 */
import type { FastifyInstance } from 'fastify';
import { buildApp, type AppDeps } from '../../services/api/app.ts';
import { loadConfig, type Config } from '../../services/db/config.ts';
import { createLogger } from '../../services/db/logger.ts';
import { createKeysRepository, type Role } from '../../services/db/keys.ts';
import { createTestDatabase, type TestDatabase } from './db.ts';

export interface TestApp {
  app: FastifyInstance;
  db: TestDatabase;
  config: Config;
  keys: { admin: string; viewer: string; operator: string; ingest: string };
  /** Creates another key, e.g. one limited to some units. */
  key(role: Role, units?: string[]): Promise<string>;
  close(): Promise<void>;
}

export async function createTestApp(opts: { env?: Record<string, string>; routes?: AppDeps['routes']; parts?: AppDeps['parts'] } = {}): Promise<TestApp> {
  const db = await createTestDatabase();
  const config = loadConfig({ LOG_LEVEL: process.env.TEST_LOG_LEVEL ?? 'silent', ...opts.env });
  const logger = createLogger(config.logLevel);
  const app = await buildApp({ config, pool: db.pool, logger, routes: opts.routes, parts: opts.parts });
  await app.ready();
  const repo = createKeysRepository(db.pool);
  const key = async (role: Role, units?: string[]) => (await repo.create(role, units ?? null)).key;
  const keys = { admin: await key('admin'), viewer: await key('viewer'), operator: await key('operator'), ingest: await key('ingest') };
  return {
    app,
    db,
    config,
    keys,
    key,
    async close() {
      await app.close();
      await db.drop();
    },
  };
}

export const bearer = (key: string) => ({ authorization: `Bearer ${key}` });

/** A valid unit registration body (an invented unit). */
export function unitBody(id: string, overrides: Record<string, unknown> = {}) {
  return {
    id,
    name: `Test unit ${id}`,
    site: 'Test Site',
    ratedPowerMw: 24,
    thermocouples: { count: 18, firstAngleDeg: 10 },
    chambers: { count: 10, firstAngleDeg: 0 },
    swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
    temperatureUnit: 'C',
    ...overrides,
  };
}
