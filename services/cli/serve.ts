/**
 * The long-running roles: `start` (everything in one process, on the embedded database by
 * default, with the demo fleet), and `api` / `ingest` / `worker` for separate processes.
 */
import type { FastifyInstance } from 'fastify';
import { buildApp, type AppParts } from './app.ts';
import { createKeysRepository } from '../db/keys.ts';
import type { Config } from '../db/config.ts';
import { startWorker, type Worker } from '../worker/index.ts';
import { openRuntime, runUntilStopped, type Runtime } from './runtime.ts';
import { registerDemoFleet, showDemoProgress, startDemoFeed } from './demo-feed.ts';
import { openTerminal, type Terminal } from './terminal.ts';
import path from 'node:path';

export interface ServeOptions {
  parts: AppParts;
  /** Run the analysis worker in this process too. */
  worker: boolean;
  /** Register the demo fleet, send its history and keep feeding it live rings. */
  demo: boolean;
  /** Print the header (URL, first admin key, where data and log are kept) and, on a terminal, the progress line. */
  announce: boolean;
}

/**
 * The keys at start. CANSIGHT_ADMIN_KEY is made an admin key the first time its value is seen;
 * once revoked it stays revoked (the start says so, and how to go on). On a start with no live
 * admin key at all, one is made and returned, to be shown once.
 */
export async function bootstrapKeys(runtime: Runtime): Promise<string | undefined> {
  const keys = createKeysRepository(runtime.pool);
  if (runtime.config.adminKey) {
    const { record, created } = await keys.ensureAdminKey(runtime.config.adminKey);
    if (created) runtime.logger.info({ keyId: record.keyId }, 'CANSIGHT_ADMIN_KEY registered as an admin key');
    else if (record.revokedAt) {
      runtime.logger.error(
        { keyId: record.keyId, revokedAt: record.revokedAt },
        `CANSIGHT_ADMIN_KEY (${record.keyId}) was revoked at ${record.revokedAt} and stays revoked: it gives no access. Remove it from the environment, or set a new value (cansight keys rotate-admin makes one)`,
      );
    } else if (record.role !== 'admin') {
      runtime.logger.error({ keyId: record.keyId, role: record.role }, `CANSIGHT_ADMIN_KEY is the value of an existing ${record.role} key (${record.keyId}); it is not made an admin key. Set another value`);
    }
  }
  if ((await keys.countActiveAdmins()) > 0) return undefined;
  const { key } = await keys.create('admin', null, 'first start');
  return key;
}

export async function serve(config: Config, opts: ServeOptions): Promise<void> {
  const started = Date.now();
  const role = opts.parts.api && opts.parts.ingest ? 'all' : opts.parts.api ? 'api' : 'ingest';
  const terminal = openTerminal(config, opts.announce);
  terminal.progress(config.databaseUrl ? 'starting: connecting to the database, applying migrations…' : `starting: PostgreSQL in ${shownPath(config.dataDir)}, applying migrations…`);
  try {
    const runtime = await openRuntime(config, { migrate: true, role, terminal });
    await runUntilStopped(runtime, startParts(runtime, config, opts, started, terminal));
  } finally {
    terminal.endProgress();
  }
  if (terminal.live) terminal.say('Cansight stopped.');
}

/** A path as a person at this directory would type it. */
function shownPath(p: string): string {
  const rel = path.relative(process.cwd(), path.resolve(p));
  return rel && !rel.startsWith('..') && !path.isAbsolute(rel) ? rel : path.resolve(p);
}

/** The header of `cansight start`: where it runs, the admin key, where data and log are kept, the caution. */
export function header(o: { address: string; firstKey: string | undefined; data: string; logFile: string | null }): string[] {
  const lines = [`Cansight is running at ${o.address}  (API reference: ${o.address}/docs)`];
  lines.push(o.firstKey ? `admin key (shown once, store it now): ${o.firstKey}` : 'admin key: the one shown on the first start (npx cansight keys create --role admin makes another)');
  lines.push(`data: ${o.data}`);
  if (o.logFile) lines.push(`log: ${o.logFile} (read it with: npx pino-pretty < ${o.logFile})`);
  lines.push("Cansight advises; the turbine's own protection and the site's procedures govern. Stop with Ctrl-C.");
  return lines;
}

/** How often connections that went idle are closed while the HTTP server closes. */
const IDLE_SWEEP_MS = 50;

/**
 * Closes the HTTP server: it takes no new connections (and answers 503 on open ones), and the
 * requests in flight finish. Connections kept alive are closed as soon as they are idle: the
 * server closes the idle ones once when closing starts, and one whose request was still in flight
 * goes idle only after its answer, which would otherwise hold the close for its whole keep-alive
 * timeout.
 */
async function closeHttp(app: FastifyInstance): Promise<void> {
  const closed = app.close();
  const sweep = setInterval(() => app.server.closeIdleConnections(), IDLE_SWEEP_MS);
  try {
    await closed;
  } finally {
    clearInterval(sweep);
  }
}

/**
 * Starts the HTTP server, the worker and the demo feed, registering how each stops. The stop
 * hooks run last registered first, so a stop goes: the demo feed (a client of this process's
 * own ingest endpoint, so it ends before the endpoint does), then the HTTP server (it takes no
 * new requests and lets those in flight finish), then the worker (it writes the rollups it holds
 * and gives its units back); after the hooks the runtime ends the pool and stops the embedded
 * PostgreSQL.
 */
async function startParts(runtime: Runtime, config: Config, opts: ServeOptions, started: number, terminal: Terminal): Promise<void> {
  const firstKey = await bootstrapKeys(runtime);
  if (opts.demo) {
    const made = await registerDemoFleet(runtime.pool);
    if (made.length) runtime.logger.info({ units: made }, 'demo units registered');
  }
  let worker: Worker | undefined;
  runtime.onShutdown(() => worker?.stop());
  const app: FastifyInstance = await buildApp({ config, pool: runtime.pool, logger: runtime.logger, parts: opts.parts });
  runtime.onShutdown(() => closeHttp(app));
  const address = await app.listen({ host: config.host, port: config.port });
  runtime.logger.info({ address, startMs: Date.now() - started }, 'listening');
  if (opts.announce) {
    const data = runtime.embedded ? `${shownPath(config.dataDir)} (embedded PostgreSQL, kept between runs; ${runtime.databaseLabel})` : `${runtime.databaseLabel} (DATABASE_URL)`;
    terminal.endProgress();
    terminal.say(header({ address, firstKey, data, logFile: terminal.output.file ? shownPath(terminal.output.file) : null }).join('\n'));
  }
  if (opts.worker) worker = await startWorker({ pool: runtime.pool, logger: runtime.logger, config });
  let stopProgress = () => undefined as void;
  if (opts.demo) {
    const feed = await startDemoFeed({ pool: runtime.pool, logger: runtime.logger, baseUrl: address, ...config.demo });
    runtime.onShutdown(() => feed.stop());
    if (terminal.live) stopProgress = showDemoProgress({ pool: runtime.pool, feed, terminal, liveEveryS: config.demo.liveEveryS });
  }
  if (terminal.live) {
    // Runs first when stopping (hooks run last registered first).
    runtime.onShutdown(() => {
      stopProgress();
      terminal.progress('stopping: finishing requests, writing held rollups, then PostgreSQL… (Ctrl-C again: at once)');
    });
  }
}
