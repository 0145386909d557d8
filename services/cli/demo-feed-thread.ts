/**
 * The demo feed's thread: simulates the demo fleet's rings and sends them, oldest first and all
 * units together, through the ingest endpoint over HTTP; then sends new rings every few
 * seconds until told to stop. Reports to the parent thread by messages.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { demoFleet } from '../sim/fleet.ts';
import { simulateUnit } from '../sim/generator.ts';
import { mergeByTime } from '../sim/merge.ts';
import type { SimUnit } from '../sim/types.ts';

const DAY_MS = 86_400_000;
/** Aborts the request in flight when the parent says stop, so stopping never waits for a send. */
const stopSending = new AbortController();

export interface DemoFeedJob {
  baseUrl: string;
  key: string;
  /** End of the first history: the simulator places the demo faults relative to it. */
  anchorMs: number;
  /** Time of the newest stored demo ring; sending continues after it. */
  lastMs: number;
  seed: number;
  steadyIntervalS: number;
  liveEveryS: number;
}

export type DemoFeedMessage =
  /** History sent so far: rings accepted, the history's span, how far it has been sent, and each unit's newest ring sent. */
  | { type: 'progress'; rings: number; fromMs: number; sentToMs: number; toMs: number; lastMsByUnit: Record<string, number> }
  | { type: 'backfilled'; rings: number; seconds: number; lastMsByUnit: Record<string, number> }
  | { type: 'failed'; message: string }
  | { type: 'warn'; message: string }
  | { type: 'sent'; rings: number };

async function send(baseUrl: string, key: string, body: string): Promise<{ accepted: number; duplicates: number; rejectedCount?: number }> {
  const res = await fetch(`${baseUrl}/v1/rings`, {
    method: 'POST',
    headers: { authorization: `Bearer ${key}`, 'content-type': 'application/x-ndjson' },
    body,
    signal: stopSending.signal,
  });
  const reply = (await res.json()) as { accepted: number; duplicates: number; rejectedCount?: number; message?: string };
  if (!res.ok) throw new Error(`demo ingest answered ${res.status}: ${reply.message ?? ''}`);
  return reply;
}

/**
 * Sends the rings of `units` in (fromMs, toMs] through the ingest endpoint in NDJSON chunks;
 * `lastMsByUnit` gets each unit's newest ring sent, and `onChunk` hears of every chunk stored.
 */
async function sendWindow(o: DemoFeedJob, units: SimUnit[], fromMs: number, toMs: number, lastMsByUnit: Record<string, number>, onChunk: (accepted: number) => void = () => undefined, chunkRings = 20_000): Promise<number> {
  if (toMs <= fromMs) return 0;
  const sims = units.map((u) => simulateUnit(u, { from: fromMs + 1, to: toMs + 1, seed: o.seed, steadyIntervalS: o.steadyIntervalS }));
  let body = '';
  let n = 0;
  let total = 0;
  let pending: Record<string, number> = {};
  const flush = async () => {
    const accepted = (await send(o.baseUrl, o.key, body)).accepted;
    Object.assign(lastMsByUnit, pending);
    total += accepted;
    onChunk(accepted);
    body = '';
    n = 0;
    pending = {};
  };
  for (const ring of mergeByTime(sims)) {
    body += JSON.stringify(ring) + '\n';
    pending[ring.unitId] = Date.parse(ring.ts);
    if (++n >= chunkRings) await flush();
  }
  if (n > 0) await flush();
  return total;
}

async function run(job: DemoFeedJob): Promise<void> {
  const port = parentPort!;
  const tell = (m: DemoFeedMessage) => port.postMessage(m);
  let stopped = false;
  let wake: (() => void) | undefined;
  port.on('message', (m: { type: string }) => {
    if (m.type === 'stop') {
      stopped = true;
      stopSending.abort();
      wake?.();
    }
  });
  const units = demoFleet(new Date(job.anchorMs).toISOString());
  let last = job.lastMs;
  const t0 = Date.now();
  let rings = 0;
  const lastMsByUnit: Record<string, number> = {};
  try {
    while (!stopped) {
      const to = Math.min(Date.now(), last + 3 * DAY_MS);
      await sendWindow(job, units, last, to, lastMsByUnit, (accepted) => {
        rings += accepted;
        tell({ type: 'progress', rings, fromMs: job.lastMs, sentToMs: Math.max(job.lastMs, ...Object.values(lastMsByUnit)), toMs: Date.now(), lastMsByUnit: { ...lastMsByUnit } });
      });
      last = to;
      if (to >= Date.now() - 1000) break;
    }
    tell({ type: 'backfilled', rings, seconds: Math.round((Date.now() - t0) / 100) / 10, lastMsByUnit: { ...lastMsByUnit } });
  } catch (err) {
    if (!stopped) tell({ type: 'failed', message: (err as Error).message });
    port.close();
    return;
  }
  while (!stopped) {
    await new Promise<void>((resolve) => {
      wake = resolve;
      setTimeout(resolve, job.liveEveryS * 1000);
    });
    if (stopped) break;
    const to = Math.floor(Date.now() / 1000) * 1000;
    try {
      const n = await sendWindow(job, units, last, to, lastMsByUnit);
      last = to;
      if (n) tell({ type: 'sent', rings: n });
    } catch (err) {
      if (!stopped) tell({ type: 'warn', message: (err as Error).message });
    }
  }
  port.close();
}

if (parentPort && workerData?.job) await run(workerData.job as DemoFeedJob);
