/**
 * The long-running roles: `start` (everything in one process, on the embedded database by
 * default, with the demo fleet), and `api` / `ingest` / `worker` for separate processes.
 */
import type { FastifyInstance } from 'fastify';
import { buildApp, type AppParts } from '../api/app.ts';
import { createKeysRepository } from '../db/keys.ts';
import type { Config } from '../db/config.ts';
import { startWorker } from '../worker/index.ts';
import { openRuntime, stopOnSignals, type Runtime } from './runtime.ts';
import { registerDemoFleet, startDemoFeed } from './demo-feed.ts';

export interface ServeOptions {
  parts: AppParts;
  /** Run the analysis worker in this process too. */
  worker: boolean;
  /** Register the demo fleet, send its history and keep feeding it live rings. */
  demo: boolean;
  /** Print the URL and first admin key for a person at a terminal. */
  announce: boolean;
}

/** Makes sure the bootstrap admin key exists; on a first start with no admin, makes one and returns it. */
export async function bootstrapKeys(runtime: Runtime): Promise<string | undefined> {
  const keys = createKeysRepository(runtime.pool);
  if (runtime.config.adminKey) await keys.ensureAdminKey(runtime.config.adminKey);
  if ((await keys.countActiveAdmins()) > 0) return undefined;
  const { key } = await keys.create('admin', null, 'first start');
  return key;
}

export async function serve(config: Config, opts: ServeOptions): Promise<void> {
  const started = Date.now();
  const role = opts.parts.api && opts.parts.ingest ? 'all' : opts.parts.api ? 'api' : 'ingest';
  const runtime = await openRuntime(config, { migrate: true, role });
  const stopped = stopOnSignals(runtime);
  const firstKey = await bootstrapKeys(runtime);
  if (opts.demo) {
    const made = await registerDemoFleet(runtime.pool);
    if (made.length) runtime.logger.info({ units: made }, 'demo units registered');
  }
  const app: FastifyInstance = await buildApp({ config, pool: runtime.pool, logger: runtime.logger, parts: opts.parts });
  runtime.onShutdown(() => app.close());
  const address = await app.listen({ host: config.host, port: config.port });
  runtime.logger.info({ address, startMs: Date.now() - started }, 'listening');
  if (opts.announce) {
    const lines = [
      `Cansight is running at ${address}  (API reference: ${address}/docs)`,
      `database: ${runtime.databaseLabel}${runtime.embedded ? ` (embedded; data kept in ${config.dataDir})` : ''}`,
    ];
    if (firstKey) lines.push(`admin key (shown once, store it now): ${firstKey}`);
    lines.push('Cansight advises; the turbine\'s own protection and the site\'s procedures govern. Stop with Ctrl-C.');
    process.stdout.write(lines.join('\n') + '\n');
  }
  if (opts.worker) {
    const worker = await startWorker({ pool: runtime.pool, logger: runtime.logger, config });
    runtime.onShutdown(() => worker.stop());
  }
  if (opts.demo) {
    const feed = await startDemoFeed({ pool: runtime.pool, logger: runtime.logger, baseUrl: address, ...config.demo });
    runtime.onShutdown(() => feed.stop());
  }
  await stopped;
}
