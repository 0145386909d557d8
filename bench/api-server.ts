/**
 * The API server of the read benchmark, run on a thread of its own so the load generator in the
 * main thread does not share its event loop (as a separate process would not).
 *
 * Between {cmd:'begin'} and {cmd:'end'} it measures where its time goes: how busy its event loop
 * was, the loop's delay, garbage collection, and requests waiting for a database connection;
 * with `profile` set it also writes a V8 CPU profile of the phase to that file.
 */
import { Session } from 'node:inspector/promises';
import { readFileSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { monitorEventLoopDelay, performance, PerformanceObserver, type EventLoopUtilization } from 'node:perf_hooks';
import { parentPort, workerData } from 'node:worker_threads';
import { buildApp } from '../services/cli/app.ts';
import { loadConfig } from '../services/db/config.ts';
import { createLogger } from '../services/db/logger.ts';
import { createPool } from '../services/db/pool.ts';

const { databaseUrl } = workerData as { databaseUrl: string };
const config = loadConfig({ ...process.env, LOG_LEVEL: 'silent', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000' });
const pool = createPool(databaseUrl, { max: config.poolMax, statementTimeoutMs: config.statementTimeoutMs });
const app = await buildApp({ config, pool, logger: createLogger('silent'), parts: { api: true, ingest: false } });
const base = await app.listen({ host: '127.0.0.1', port: 0 });

/** CPU seconds used by this thread so far (Linux), or null elsewhere. */
function threadCpuS(): number | null {
  try {
    const stat = readFileSync('/proc/thread-self/stat', 'utf8');
    const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    return (Number(f[11]) + Number(f[12])) / 100;
  } catch {
    return null;
  }
}

export interface PhaseStats {
  /** Share of the phase the server thread's event loop was busy, 0..1 (waiting for a CPU counts as busy). */
  loopBusy: number;
  /** CPU seconds the server thread used in the phase, or null where it cannot be told. */
  cpuS: number | null;
  loopDelayP99Ms: number;
  gcMs: number;
  gcCount: number;
  /** Requests waiting for a pool connection, sampled every 5 ms: mean and max. */
  poolWaitingMean: number;
  poolWaitingMax: number;
  poolMax: number;
}

interface Phase {
  elu: EventLoopUtilization;
  delay: ReturnType<typeof monitorEventLoopDelay>;
  gc: PerformanceObserver;
  gcMs: number;
  gcCount: number;
  sampler: NodeJS.Timeout;
  waitingSum: number;
  waitingMax: number;
  samples: number;
  profile: string | null;
  session: Session | null;
  cpu0: number | null;
}

let phase: Phase | null = null;

async function begin(profile: string | null): Promise<void> {
  const p: Phase = {
    elu: performance.eventLoopUtilization(),
    delay: monitorEventLoopDelay({ resolution: 10 }),
    gc: new PerformanceObserver((list) => {
      for (const e of list.getEntries()) {
        p.gcMs += e.duration;
        p.gcCount++;
      }
    }),
    gcMs: 0,
    gcCount: 0,
    sampler: setInterval(() => {
      p.waitingSum += pool.waitingCount;
      p.waitingMax = Math.max(p.waitingMax, pool.waitingCount);
      p.samples++;
    }, 5),
    waitingSum: 0,
    waitingMax: 0,
    samples: 0,
    profile,
    session: null,
    cpu0: threadCpuS(),
  };
  p.delay.enable();
  p.gc.observe({ entryTypes: ['gc'] });
  if (profile) {
    p.session = new Session();
    p.session.connect();
    await p.session.post('Profiler.enable');
    await p.session.post('Profiler.setSamplingInterval', { interval: 200 });
    await p.session.post('Profiler.start');
  }
  phase = p;
}

async function end(): Promise<PhaseStats> {
  const p = phase!;
  phase = null;
  const elu = performance.eventLoopUtilization(p.elu);
  const cpu1 = threadCpuS();
  p.delay.disable();
  p.gc.disconnect();
  clearInterval(p.sampler);
  if (p.session) {
    const { profile } = await p.session.post('Profiler.stop');
    p.session.disconnect();
    await writeFile(p.profile!, JSON.stringify(profile));
  }
  const r1 = (v: number) => Math.round(v * 10) / 10;
  return {
    loopBusy: Math.round(elu.utilization * 1000) / 1000,
    cpuS: p.cpu0 !== null && cpu1 !== null ? Math.round((cpu1 - p.cpu0) * 100) / 100 : null,
    loopDelayP99Ms: r1(p.delay.percentile(99) / 1e6),
    gcMs: Math.round(p.gcMs),
    gcCount: p.gcCount,
    poolWaitingMean: r1(p.samples ? p.waitingSum / p.samples : 0),
    poolWaitingMax: p.waitingMax,
    poolMax: config.poolMax,
  };
}

parentPort!.on('message', async (m: string | { cmd: 'begin'; profile?: string | null } | { cmd: 'end' }) => {
  if (m === 'close') {
    await app.close();
    await pool.end();
    parentPort!.close();
    return;
  }
  if (typeof m === 'object' && m.cmd === 'begin') {
    await begin(m.profile ?? null);
    parentPort!.postMessage({ begun: true });
  } else if (typeof m === 'object' && m.cmd === 'end') {
    parentPort!.postMessage({ stats: await end() });
  }
});
parentPort!.postMessage({ base });
