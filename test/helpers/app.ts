/**
 * A Cansight HTTP application on a fresh test database, with keys of each role ready.
 * `send` goes through app.inject by default, or over a real loopback socket with
 * `transport: 'socket'` (see transport.ts); the error tests run both.
 */
import type { FastifyInstance } from 'fastify';
import { buildApp, type AppDeps } from '../../services/cli/app.ts';
import { loadConfig, type Config } from '../../services/db/config.ts';
import { createLogger } from '../../services/db/logger.ts';
import { createKeysRepository, type Role } from '../../services/db/keys.ts';
import { createTestDatabase, type TestDatabase } from './db.ts';
import { injectSender, socketSender, type Reply, type Send, type SendOptions, type Transport } from './transport.ts';

export interface TestApp {
  app: FastifyInstance;
  db: TestDatabase;
  config: Config;
  /** How `send` reaches the app. */
  transport: Transport;
  /** One request through the chosen transport, answered in inject's reply shape. */
  send: Send;
  /** One request through the given transport (the socket is opened on first use). */
  sendVia(via: Transport, o: SendOptions): Promise<Reply>;
  /** The log lines written so far, parsed, when the app was made with `captureLog`. */
  log: Array<Record<string, unknown>>;
  keys: { admin: string; viewer: string; operator: string; ingest: string };
  /** Creates another key, e.g. one limited to some units. */
  key(role: Role, units?: string[]): Promise<string>;
  close(): Promise<void>;
}

export async function createTestApp(opts: { env?: Record<string, string>; routes?: AppDeps['routes']; parts?: AppDeps['parts']; transport?: Transport; captureLog?: boolean } = {}): Promise<TestApp> {
  const db = await createTestDatabase();
  const config = loadConfig({ LOG_LEVEL: process.env.TEST_LOG_LEVEL ?? 'silent', ...opts.env });
  const log: Array<Record<string, unknown>> = [];
  const logger = opts.captureLog
    ? createLogger('info', {}, { write: (line: string) => void log.push(JSON.parse(line)) })
    : createLogger(config.logLevel);
  const app = await buildApp({ config, pool: db.pool, logger, routes: opts.routes, parts: opts.parts });
  await app.ready();
  const repo = createKeysRepository(db.pool);
  const key = async (role: Role, units?: string[]) => (await repo.create(role, units ?? null)).key;
  const keys = { admin: await key('admin'), viewer: await key('viewer'), operator: await key('operator'), ingest: await key('ingest') };
  const transport = opts.transport ?? 'inject';
  let socket = transport === 'socket' ? await socketSender(app) : null;
  const inject = injectSender(app);
  return {
    app,
    db,
    config,
    transport,
    send: socket ? socket.send : inject,
    async sendVia(via, o) {
      if (via === 'inject') return inject(o);
      socket ??= await socketSender(app);
      return socket.send(o);
    },
    log,
    keys,
    key,
    async close() {
      await socket?.close();
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
