/**
 * The long-running roles: `start` (everything in one process, on the embedded database by
 * default, with the demo fleet), and `api` / `ingest` / `worker` for separate processes.
 */
import type { FastifyInstance } from 'fastify';
import { buildApp, type AppParts } from '../api/app.ts';
import { createKeysRepository } from '../db/keys.ts';
import { createUnitsRepository } from '../db/units.ts';
import type { Config } from '../db/config.ts';
import { openRuntime, stopOnSignals, type Runtime } from './runtime.ts';
import { DEMO_UNITS } from './demo-units.ts';

export interface ServeOptions {
  parts: AppParts;
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

export async function registerDemoUnits(runtime: Runtime): Promise<string[]> {
  const units = createUnitsRepository(runtime.pool);
  const made: string[] = [];
  for (const u of DEMO_UNITS) {
    if (await units.exists(u.id)) continue;
    const { id, name, site, ...config } = u;
    await units.create({ id, name, site }, config, 'demo').catch((err: Error) => {
      if (!/already exists/.test(err.message)) throw err;
    });
    made.push(id);
  }
  return made;
}

export async function serve(config: Config, opts: ServeOptions): Promise<void> {
  const started = Date.now();
  const runtime = await openRuntime(config, { migrate: true, role: opts.parts.api && opts.parts.ingest ? 'all' : opts.parts.api ? 'api' : 'ingest' });
  const stopped = stopOnSignals(runtime);
  const firstKey = await bootstrapKeys(runtime);
  if (opts.demo) {
    const made = await registerDemoUnits(runtime);
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
  await stopped;
}
