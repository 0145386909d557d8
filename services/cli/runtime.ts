/**
 * What every `cansight` command that touches the database shares: the configuration, the
 * logger, the database (DATABASE_URL, or the embedded server under CANSIGHT_DATA_DIR with a
 * `cansight` database in it), migrations, and a clean stop on SIGINT/SIGTERM.
 *
 * Signals: from the start of openRuntime until its shutdown has finished, SIGINT and SIGTERM
 * are handled here. Without stopOnSignals (the one-shot commands) a signal ends the process at
 * once; the embedded PostgreSQL, which runs in a process group of its own and so does not get
 * the terminal's Ctrl-C itself, is told to stop as the process exits. With stopOnSignals (the
 * long-running roles) the first signal starts the clean stop: the stop hooks (the roles' own
 * parts, last registered first), then the pool, then the embedded PostgreSQL. A second signal
 * always ends the process at once.
 */
import { constants } from 'node:os';
import pg from 'pg';
import type { Config } from '../db/config.ts';
import { createLogger, type Logger } from '../db/logger.ts';
import { startEmbeddedPostgres, type EmbeddedServer } from '../db/embedded.ts';
import { createPool, type Pool } from '../db/pool.ts';
import { migrate } from '../db/migrate.ts';
import { openTerminal, type Terminal } from './terminal.ts';

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

/** Longest wait for the pool's connections to close when it ends. */
const POOL_CLOSE_WAIT_MS = 5_000;

/**
 * Ends the pool and waits until each of its connections is closed. pool.end() resolves as soon
 * as the pool has let go of its connections, before they have closed; a server stopped at that
 * moment would end them itself, and each would be logged as a lost connection.
 */
function poolEnder(pool: Pool): () => Promise<void> {
  const open = new Set<unknown>();
  let allClosed: (() => void) | undefined;
  pool.on('connect', (client) => open.add(client));
  pool.on('remove', (client) => {
    open.delete(client);
    if (open.size === 0) allClosed?.();
  });
  return async () => {
    await pool.end().catch(() => undefined);
    if (open.size === 0) return;
    await new Promise<void>((resolve) => {
      allClosed = resolve;
      setTimeout(resolve, POOL_CLOSE_WAIT_MS).unref();
    });
  };
}

/** What a runtime does on its first SIGINT/SIGTERM once stopOnSignals has been called. */
const cleanStops = new WeakMap<Runtime, (setStop: (sig: NodeJS.Signals) => void) => void>();

const STOP_SIGNALS = ['SIGINT', 'SIGTERM'] as const;
/** The exit code of a process ended by the signal: 128 + its number (130 for SIGINT, 143 for SIGTERM). */
const exitCodeFor = (sig: NodeJS.Signals) => 128 + (constants.signals[sig] ?? 0);

/**
 * `terminal`: where the log goes and what a person sees (default: this process's stdout, with no
 * header or progress line of its own; see terminal.ts).
 */
export async function openRuntime(config: Config, opts: { migrate: boolean; role: string; terminal?: Terminal }): Promise<Runtime> {
  const terminal = opts.terminal ?? openTerminal(config, false);
  const logger = createLogger(config.logLevel, { role: opts.role }, terminal.logDestination(config.logLevel));
  let cleanStop: ((sig: NodeJS.Signals) => void) | undefined;
  let signalled = false;
  const onSignal = (sig: NodeJS.Signals) => {
    if (signalled || !cleanStop) process.exit(exitCodeFor(sig));
    signalled = true;
    cleanStop(sig);
  };
  for (const sig of STOP_SIGNALS) process.on(sig, onSignal);
  const unwatchSignals = () => {
    for (const sig of STOP_SIGNALS) process.off(sig, onSignal);
  };
  let embedded: EmbeddedServer | undefined;
  // The embedded server died and could not be started again: say so, stop, and exit non-zero
  // (serving 503 for ever would hide it). Set once the runtime exists.
  let lost = (err: Error): void => {
    process.stderr.write(`cansight: ${err.message}\n`);
    process.exit(1);
  };
  let url = config.databaseUrl;
  try {
    if (!url) {
      embedded = await startEmbeddedPostgres({ dataDir: config.dataDir, preferredPort: config.embeddedPgPort, logger, onLost: (err) => lost(err) });
      url = await ensureDatabase(embedded.url, EMBEDDED_DATABASE);
    }
  } catch (err) {
    await embedded?.stop();
    unwatchSignals();
    throw err;
  }
  const pool = createPool(url, { max: config.poolMax, statementTimeoutMs: config.statementTimeoutMs, logger });
  const endPool = poolEnder(pool);
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
        try {
          // Last registered first; a hook registered while others run still runs before the pool ends.
          for (let fn = hooks.pop(); fn; fn = hooks.pop()) {
            try {
              await fn();
            } catch (err) {
              logger.warn({ err: (err as Error).message }, 'error while stopping');
            }
          }
          await endPool();
          if (embedded) await embedded.stop();
        } finally {
          unwatchSignals();
        }
      })();
      return done;
    },
  };
  cleanStops.set(runtime, (fn) => {
    cleanStop = fn;
  });
  lost = (err) => {
    process.stderr.write(`cansight: ${err.message}; stopping\n`);
    void runtime.shutdown().finally(() => process.exit(1));
  };
  try {
    if (opts.migrate) await migrate(pool, logger);
  } catch (err) {
    await runtime.shutdown();
    throw err;
  }
  return runtime;
}

/**
 * Stops cleanly on SIGINT/SIGTERM: resolves once the runtime has shut down. A signal that
 * arrives while `started` (the role's start-up, which registers its stop hooks) is still
 * pending waits for it, so every part started is stopped in its turn. A second signal ends the
 * process at once.
 */
export function stopOnSignals(runtime: Runtime, started: Promise<unknown> = Promise.resolve()): Promise<void> {
  const setStop = cleanStops.get(runtime);
  if (!setStop) throw new Error('stopOnSignals needs a runtime made by openRuntime');
  return new Promise((resolve) => {
    setStop((sig) => {
      runtime.logger.info({ signal: sig }, 'stopping');
      started
        .then(
          () => undefined,
          () => undefined,
        )
        .then(() => runtime.shutdown())
        .then(resolve, (err) => {
          runtime.logger.error({ err }, 'stop failed');
          resolve();
        });
    });
  });
}

/**
 * Runs a long-running role: waits for its start-up (`starting`, which registers its stop hooks),
 * then for a stop signal, and stops cleanly; a failed start-up shuts the runtime down and throws.
 */
export async function runUntilStopped(runtime: Runtime, starting: Promise<unknown>): Promise<void> {
  const stopped = stopOnSignals(runtime, starting);
  try {
    await starting;
  } catch (err) {
    await runtime.shutdown();
    throw err;
  }
  await stopped;
}
