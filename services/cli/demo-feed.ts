/**
 * The living demo fleet of `cansight start`: the simulator's invented units are registered,
 * their recent history (90 days by default, one ring a minute in steady running, one a second
 * through starts) is sent through the real ingest endpoint of this process over HTTP, oldest
 * first and all units together so every unit's analysis advances at once, and new rings keep
 * arriving every few seconds afterwards. The feed continues where the stored data ends, so a
 * restart neither repeats nor leaves a gap; faults are placed relative to the time the demo
 * data began, so they develop the same way on every run.
 */
import type { Logger } from '../db/logger.ts';
import type { Pool } from '../db/pool.ts';
import { createKeysRepository } from '../db/keys.ts';
import { createUnitsRepository } from '../db/units.ts';
import { ringTimeSpan } from '../db/rings.ts';
import { Worker } from 'node:worker_threads';
import { demoFleetConfigs } from '../sim/fleet.ts';
import type { DemoFeedJob, DemoFeedMessage } from './demo-feed-thread.ts';

const DAY_MS = 86_400_000;

export interface DemoFeedOptions {
  pool: Pool;
  logger: Logger;
  /** Base URL of this process's HTTP server, e.g. http://127.0.0.1:8080. */
  baseUrl: string;
  /** Days of history when the database holds none. */
  historyDays: number;
  /** Seconds between live sends. */
  liveEveryS: number;
  /** Seconds between rings in steady running, for history and live. */
  steadyIntervalS: number;
  seed: number;
}

export interface DemoFeed {
  /** Resolves when the history is stored (rejects if sending it failed). */
  readonly backfilled: Promise<{ rings: number }>;
  stop(): Promise<void>;
}

/** Registers the demo fleet's units that are missing; returns the ids it registered. */
export async function registerDemoFleet(pool: Pool): Promise<string[]> {
  const units = createUnitsRepository(pool);
  const made: string[] = [];
  for (const u of demoFleetConfigs()) {
    if (await units.exists(u.id)) continue;
    const { id, name, site, ...config } = u;
    try {
      await units.create({ id, name, site }, config, 'demo');
      made.push(id);
    } catch (err) {
      if (!/already exists/.test((err as Error).message)) throw err;
    }
  }
  return made;
}

export async function startDemoFeed(o: DemoFeedOptions): Promise<DemoFeed> {
  const ids = demoFleetConfigs().map((c) => c.id);
  const keys = createKeysRepository(o.pool);
  const { key, record } = await keys.create('ingest', ids, 'demo feed');
  const span = await ringTimeSpan(o.pool, ids);
  // Faults are placed relative to the end of the first history: keep that anchor across runs.
  const startedAtMs = span ? span.firstMs : Date.now() - o.historyDays * DAY_MS;
  const job: DemoFeedJob = {
    baseUrl: o.baseUrl,
    key,
    anchorMs: startedAtMs + o.historyDays * DAY_MS,
    lastMs: span ? span.lastMs : startedAtMs,
    seed: o.seed,
    steadyIntervalS: o.steadyIntervalS,
    liveEveryS: o.liveEveryS,
  };
  const log = o.logger.child({ component: 'demo-feed' });
  // Simulating and serialising rings is CPU work: it runs on its own thread so this one stays
  // free for ingest, analysis and the API.
  const thread = new Worker(new URL('./thread-entry.mjs', import.meta.url), {
    workerData: { module: new URL('./demo-feed-thread.ts', import.meta.url).href, job },
  });
  let settle!: { resolve: (v: { rings: number }) => void; reject: (e: Error) => void };
  const backfilled = new Promise<{ rings: number }>((resolve, reject) => (settle = { resolve, reject }));
  backfilled.catch(() => undefined);
  thread.on('message', (m: DemoFeedMessage) => {
    if (m.type === 'backfilled') {
      log.info({ rings: m.rings, seconds: m.seconds }, 'demo history stored');
      settle.resolve({ rings: m.rings });
    } else if (m.type === 'failed') {
      log.error({ err: m.message }, 'demo history could not be sent');
      settle.reject(new Error(m.message));
    } else if (m.type === 'warn') {
      log.warn({ err: m.message }, 'demo live send failed; retrying');
    } else {
      log.debug({ rings: m.rings }, 'demo rings sent');
    }
  });
  const exited = new Promise<void>((resolve) => thread.once('exit', () => resolve()));
  thread.on('error', (err) => {
    log.error({ err: err.message }, 'demo feed stopped');
    settle.reject(err);
  });
  return {
    backfilled,
    async stop() {
      thread.postMessage({ type: 'stop' });
      const timeout = setTimeout(() => void thread.terminate(), 10_000);
      await exited;
      clearTimeout(timeout);
      await keys.revoke(record.id).catch(() => undefined);
    },
  };
}
