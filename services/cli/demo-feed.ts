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
import { unitsAnalysed } from '../db/progress.ts';
import type { Terminal } from './terminal.ts';
import { Worker } from 'node:worker_threads';
import { demoFleet, demoFleetConfigs } from '../sim/fleet.ts';
import { createEventsRepository } from '../db/events.ts';
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

/** How far the demo history has been sent (rings accepted by ingest in this run). */
export interface DemoFeedProgress {
  rings: number;
  /** The history's span: from the newest demo ring stored before this run (or its start) to now. */
  fromMs: number;
  toMs: number;
  /** Newest ring time sent so far. */
  sentToMs: number;
  /** Each unit's newest ring sent. */
  lastMsByUnit: Record<string, number>;
  /** Every ring of the history is stored; live rings follow. */
  backfilled: boolean;
}

export interface DemoFeed {
  /** Resolves when the history is stored (rejects if sending it failed). */
  readonly backfilled: Promise<{ rings: number }>;
  /** The latest progress report of the history, null before the first chunk is stored. */
  progress(): DemoFeedProgress | null;
  stop(): Promise<void>;
}

/** Registers the demo fleet's units that are missing; returns the ids it registered. */
export async function registerDemoFleet(pool: Pool): Promise<string[]> {
  const units = createUnitsRepository(pool);
  const made: string[] = [];
  for (const u of demoFleetConfigs()) {
    if (await units.exists(u.id)) continue;
    const { id, name, site, family, ...config } = u;
    try {
      await units.create({ id, name, site, family }, config, 'demo');
      made.push(id);
    } catch (err) {
      if (!/already exists/.test((err as Error).message)) throw err;
    }
  }
  return made;
}

/**
 * The maintenance the demo fleet's story holds (a thermocouple replaced on mr-2), recorded as
 * events once, at the times the simulator puts them for the fleet anchored at anchorMs.
 */
async function recordDemoEvents(pool: Pool, anchorMs: number): Promise<void> {
  const events = createEventsRepository(pool);
  for (const u of demoFleet(new Date(anchorMs).toISOString())) {
    for (const f of u.faults ?? []) {
      if (f.kind !== 'tc_replaced') continue;
      const at = new Date(f.at);
      const known = await events.list(u.config.id);
      if (known.some((e) => e.kind === 'thermocouple_replaced' && Date.parse(e.at) === at.getTime())) continue;
      await events.create({ unitId: u.config.id, kind: 'thermocouple_replaced', at, thermocouples: [f.thermocouple], chambers: null, by: 'demo instrument technician', note: `Thermocouple ${f.thermocouple} read erratic at times; probe and lead replaced with a new class 2 type K probe.`, keyId: null });
    }
  }
}

export async function startDemoFeed(o: DemoFeedOptions): Promise<DemoFeed> {
  const ids = demoFleetConfigs().map((c) => c.id);
  const keys = createKeysRepository(o.pool);
  const { key, record } = await keys.create('ingest', ids, 'demo feed');
  const span = await ringTimeSpan(o.pool, ids);
  // Faults are placed relative to the end of the first history: keep that anchor across runs.
  const startedAtMs = span ? span.firstMs : Date.now() - o.historyDays * DAY_MS;
  await recordDemoEvents(o.pool, startedAtMs + o.historyDays * DAY_MS);
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
  let progress: DemoFeedProgress | null = null;
  thread.on('message', (m: DemoFeedMessage) => {
    if (m.type === 'progress') {
      progress = { rings: m.rings, fromMs: m.fromMs, toMs: m.toMs, sentToMs: m.sentToMs, lastMsByUnit: m.lastMsByUnit, backfilled: false };
    } else if (m.type === 'backfilled') {
      const nowMs = Date.now();
      progress = { rings: m.rings, fromMs: progress?.fromMs ?? job.lastMs, toMs: nowMs, sentToMs: nowMs, lastMsByUnit: m.lastMsByUnit, backfilled: true };
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
    progress: () => progress,
    async stop() {
      thread.postMessage({ type: 'stop' });
      const timeout = setTimeout(() => void thread.terminate(), 10_000);
      await exited;
      clearTimeout(timeout);
      await keys.revoke(record.id).catch(() => undefined);
    },
  };
}

export interface DemoProgressFigures {
  sent: DemoFeedProgress | null;
  /** Rings of the demo units analysed in this run. */
  analysed: number;
  caughtUp: number;
  units: number;
  /** Estimated seconds until every unit is caught up; null while there is no estimate. */
  leftS: number | null;
}

const count = (n: number) => Math.round(n).toLocaleString('en-GB');

/** "about 40 s" / "about 3 min" / "4 min 10 s" style durations for people. */
export function duration(seconds: number, about = false): string {
  const s = Math.max(0, Math.round(seconds));
  if (about) return s < 90 ? `about ${Math.max(5, Math.round(s / 5) * 5)} s` : `about ${Math.round(s / 60)} min`;
  return s < 90 ? `${s} s` : `${Math.floor(s / 60)} min ${String(s % 60).padStart(2, '0')} s`;
}

/** The progress line of the demo history: rings stored and analysed, units caught up, time left. */
export function demoProgressLine(f: DemoProgressFigures): string {
  if (!f.sent) return `demo history: simulating the first days and sending them · ${f.caughtUp} of ${f.units} units caught up`;
  const span = Math.max(1, f.sent.toMs - f.sent.fromMs);
  const share = f.sent.backfilled ? 'all sent' : `${Math.min(99, Math.floor((100 * (f.sent.sentToMs - f.sent.fromMs)) / span))} % sent`;
  const left = f.leftS === null ? 'estimating the time left' : `${duration(f.leftS, true)} left`;
  return `demo history: ${share} · ${count(f.sent.rings)} rings stored · ${count(Math.min(f.analysed, f.sent.rings))} analysed · ${f.caughtUp} of ${f.units} units caught up · ${left}`;
}

/**
 * How many units are caught up: their whole history is stored and analysed up to its newest ring
 * (none before the history is all sent, so the count only grows).
 */
export function unitsCaughtUp(sent: DemoFeedProgress | null, watermarks: ReadonlyMap<string, number | null>, ids: readonly string[]): number {
  if (!sent?.backfilled) return 0;
  let n = 0;
  for (const id of ids) {
    const last = sent.lastMsByUnit[id];
    const w = watermarks.get(id) ?? null;
    if (last === undefined || (w !== null && w >= last)) n++;
  }
  return n;
}

/**
 * Draws the demo history's progress on the terminal's progress line every second until every
 * demo unit is analysed up to the end of its history, then leaves one line saying the demo is
 * live. The time left is the longer of sending the rest (at the send rate so far) and analysing
 * it (at the analysis rate of the last half minute). Returns a function that stops it.
 */
export function showDemoProgress(o: { pool: Pool; feed: DemoFeed; terminal: Terminal; liveEveryS: number; everyMs?: number }): () => void {
  const ids = demoFleetConfigs().map((c) => c.id);
  const t0 = Date.now();
  let base: number | null = null;
  const samples: { t: number; analysed: number; rings: number }[] = [];
  let busy = false;
  let stopped = false;
  const tick = async () => {
    if (busy || stopped) return;
    busy = true;
    try {
      const rows = await unitsAnalysed(o.pool, ids);
      if (stopped) return;
      const total = rows.reduce((a, r) => a + r.ringsAnalysed, 0);
      base ??= total;
      const analysed = total - base;
      const sent = o.feed.progress();
      const caughtUp = unitsCaughtUp(sent, new Map(rows.map((r) => [r.unitId, r.watermarkMs])), ids);
      const now = Date.now();
      samples.push({ t: now, analysed, rings: sent?.rings ?? 0 });
      while (samples.length > 2 && now - samples[0].t > 30_000) samples.shift();
      if (sent?.backfilled && caughtUp === ids.length) {
        stop();
        o.terminal.endProgress(`demo live: ${count(sent.rings)} rings of history stored and analysed in ${duration((now - t0) / 1000)}; new rings arrive every ${o.liveEveryS} s.`);
        return;
      }
      o.terminal.progress(demoProgressLine({ sent, analysed, caughtUp, units: ids.length, leftS: timeLeftS(samples, sent, analysed, now - t0) }));
    } catch {
      // The database is going away (a stop): the next tick, if any, tries again.
    } finally {
      busy = false;
    }
  };
  const timer = setInterval(() => void tick(), o.everyMs ?? 1000);
  timer.unref();
  o.terminal.progress(demoProgressLine({ sent: null, analysed: 0, caughtUp: 0, units: ids.length, leftS: null }));
  const stop = () => {
    stopped = true;
    clearInterval(timer);
  };
  return () => {
    if (!stopped) o.terminal.endProgress();
    stop();
  };
}

/** Seconds left by the rates of the samples (oldest to newest); null until there are ten seconds of them. */
function timeLeftS(samples: { t: number; analysed: number; rings: number }[], sent: DemoFeedProgress | null, analysed: number, runningMs: number): number | null {
  if (!sent || samples.length < 2 || runningMs < 10_000) return null;
  const a = samples[0];
  const b = samples[samples.length - 1];
  const dt = (b.t - a.t) / 1000;
  if (dt <= 0) return null;
  const span = Math.max(1, sent.toMs - sent.fromMs);
  const share = sent.backfilled ? 1 : Math.max(0.01, (sent.sentToMs - sent.fromMs) / span);
  const expected = sent.rings / share;
  const analyseRate = (b.analysed - a.analysed) / dt;
  const sendRate = sent.rings / (runningMs / 1000);
  if (analyseRate <= 0) return null;
  const analyseLeft = Math.max(0, expected - analysed) / analyseRate;
  const sendLeft = sent.backfilled || sendRate <= 0 ? 0 : Math.max(0, expected - sent.rings) / sendRate;
  return Math.max(analyseLeft, sendLeft);
}
