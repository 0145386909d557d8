/**
 * What every `cansight` command that touches the database shares: the configuration, the
 * logger, the database (DATABASE_URL, or the embedded server under CANSIGHT_DATA_DIR with a
 * `cansight` database in it), migrations, and a clean stop on SIGINT/SIGTERM.
 */
import pg from 'pg';
import type { Config } from '../db/config.ts';
import { createLogger, type Logger } from '../db/logger.ts';
import { startEmbeddedPostgres, type EmbeddedServer } from '../db/embedded.ts';
import { createPool, type Pool } from '../db/pool.ts';
import { migrate } from '../db/migrate.ts';

export const EMBEDDED_DATABASE = 'cansight';

export interface Runtime {
  config: Config;
  logger: Logger;
  pool: Pool;
  /** Where the data lives, for people: a URL without its password. */
  databaseLabel: string;
  embedded: EmbeddedServer | undefined;
  /** Runs the stop hooks (last registered first), ends the pool, stops the embedded server. */
  shutdown(): Promise<void>;
  onShutdown(fn: () => Promise<void> | void): void;
}

function withoutPassword(url: string): string {
  const u = new URL(url);
  if (u.password) u.password = '***';
  return u.toString();
}

async function ensureDatabase(adminUrl: string, name: string): Promise<string> {
  const c = new pg.Client({ connectionString: adminUrl });
  await c.connect();
  try {
    const { rowCount } = await c.query('SELECT 1 FROM pg_database WHERE datname = $1', [name]);
    if (!rowCount) await c.query(`CREATE DATABASE ${name}`);
  } catch (err) {
    if ((err as { code?: string }).code !== '42P04') throw err; // created by a process starting beside us
  } finally {
    await c.end();
  }
  const u = new URL(adminUrl);
  u.pathname = '/' + name;
  return u.toString();
}

export async function openRuntime(config: Config, opts: { migrate: boolean; role: string }): Promise<Runtime> {
  const logger = createLogger(config.logLevel, { role: opts.role });
  let embedded: EmbeddedServer | undefined;
  let url = config.databaseUrl;
  if (!url) {
    embedded = await startEmbeddedPostgres({ dataDir: config.dataDir, preferredPort: config.embeddedPgPort, logger });
    url = await ensureDatabase(embedded.url, EMBEDDED_DATABASE);
  }
  const pool = createPool(url, { max: config.poolMax, statementTimeoutMs: config.statementTimeoutMs, logger });
  const hooks: Array<() => Promise<void> | void> = [];
  let done: Promise<void> | undefined;
  const runtime: Runtime = {
    config,
    logger,
    pool,
    databaseLabel: withoutPassword(url),
    embedded,
    onShutdown: (fn) => void hooks.push(fn),
    shutdown() {
      done ??= (async () => {
        for (const fn of hooks.reverse()) {
          try {
            await fn();
          } catch (err) {
            logger.warn({ err: (err as Error).message }, 'error while stopping');
          }
        }
        await pool.end().catch(() => undefined);
        if (embedded) await embedded.stop();
      })();
      return done;
    },
  };
  try {
    if (opts.migrate) await migrate(pool, logger);
  } catch (err) {
    await runtime.shutdown();
    throw err;
  }
  return runtime;
}

/** Stops cleanly on SIGINT/SIGTERM; a second signal ends the process at once. */
export function stopOnSignals(runtime: Runtime): Promise<void> {
  return new Promise((resolve) => {
    let stopping = false;
    const onSignal = (sig: NodeJS.Signals) => {
      if (stopping) process.exit(130);
      stopping = true;
      runtime.logger.info({ signal: sig }, 'stopping');
      runtime.shutdown().then(resolve, (err) => {
        runtime.logger.error({ err }, 'stop failed');
        resolve();
      });
    };
    process.once('SIGINT', onSignal);
    process.once('SIGTERM', onSignal);
  });
}
