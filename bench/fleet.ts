/**
 * Fleet benchmark: N units (default 1,000) each sending one ring a second, gathered into one
 * NDJSON request a second to POST /v1/rings, as a monitoring centre's gateway sends them, for
 * BENCH_SECONDS (default 120). The service is `cansight start --no-demo` in a process of its
 * own (ingest, worker and API, as a newcomer runs it) on a throwaway embedded PostgreSQL (or
 * DATABASE_URL). Reported:
 * - reply time of the requests, p50 / p99;
 * - analysis lag: for each second's request, from sending it until every unit's analysis has
 *   passed its rings (polled every 100 ms), p50 / p99;
 * - CPU per ring of the service process and of PostgreSQL;
 * - the service's resident memory at the start, every 30 s and at the end, and the growth over
 *   the last half of the run (levels off when it stays near zero);
 * - before the load, on the idle service: the reply time of one request of N rings spread over
 *   N units against one of N rings of a single unit (medians of 5 each, and their ratio).
 * Requests are sent on the second whether or not the previous one has been answered (a gateway
 * does not wait), so a service that cannot keep up shows as overlapping requests and growing lag.
 * The last line printed is one JSON object.
 *
 *   npm run bench:fleet          BENCH_UNITS (1000), BENCH_SECONDS (120), BENCH_TC (20),
 *                                BENCH_PROFILE_DIR (write a V8 CPU profile of the service there),
 *                                BENCH_HEAP=1 (also the service's live heap and its array
 *                                buffers after a full garbage collection every 30 s, through
 *                                its inspector: RSS alone grows while V8 puts off major
 *                                collections, and typed-array data lies outside the heap)
 */
import { spawn } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { Agent, WebSocket, request } from 'undici';
import { quantile } from 'simple-statistics';
import { postgresSeconds, postmasterPid, processSeconds } from './cpu.ts';
import { freePort, startThrowawayPostgres } from '../services/db/embedded.ts';
import { createKeysRepository } from '../services/db/keys.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool } from '../services/db/pool.ts';
import { createUnitsRepository } from '../services/db/units.ts';
import type { UnitConfig } from '../services/core/types.ts';

const UNITS = Number(process.env.BENCH_UNITS ?? 1000);
const SECONDS = Number(process.env.BENCH_SECONDS ?? 120);
const TC = Number(process.env.BENCH_TC ?? 20);
const log = (line: string) => process.stdout.write(line + '\n');

const unitConfig: UnitConfig = {
  ratedPowerMw: 31.5,
  thermocouples: { count: TC, firstAngleDeg: 9 },
  chambers: { count: 12, firstAngleDeg: 15 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
};
const unitId = (u: number) => `fleet-${String(u).padStart(4, '0')}`;

/** One ring of unit u at second s: steady running, a little noise, readings to 0.1 °C. */
function line(u: number, tsIso: string, s: number): string {
  const ex: string[] = new Array(TC);
  for (let k = 0; k < TC; k++) ex[k] = (548 + 9 * Math.sin((k / TC) * 2 * Math.PI + u) + (((s * 7 + k * 13 + u) % 11) - 5) * 0.08).toFixed(1);
  return `{"unitId":"${unitId(u)}","ts":"${tsIso}","loadMw":${(25 + (u % 7) * 0.3).toFixed(1)},"ambientC":14.2,"ambientKPa":100.8,"speedPct":100,"exhaustC":[${ex.join(',')}]}\n`;
}

/** CPU seconds of one process and its exited children, and its resident memory, from /proc. */
function procStat(pid: number): { cpuS: number; rssMiB: number } {
  let rss: RegExpExecArray | null = null;
  try {
    rss = /VmRSS:\s+(\d+) kB/.exec(readFileSync(`/proc/${pid}/status`, 'utf8'));
  } catch {
    // gone
  }
  return { cpuS: processSeconds(pid), rssMiB: rss ? Number(rss[1]) / 1024 : NaN };
}

const postgresCpuS = (postmaster: number | null) => postgresSeconds(postmaster).all;

/**
 * The live memory of a process after a full collection, MiB, through its inspector (DevTools
 * protocol): its JavaScript heap, and the typed-array data kept outside that heap (array buffers).
 */
async function liveMemoryMiB(inspectPort: number): Promise<{ heap: number; arrayBuffers: number }> {
  const [target] = (await (await fetch(`http://127.0.0.1:${inspectPort}/json/list`)).json()) as Array<{ webSocketDebuggerUrl: string }>;
  const ws = new WebSocket(target.webSocketDebuggerUrl);
  await new Promise((resolve, reject) => {
    ws.onopen = resolve;
    ws.onerror = reject;
  });
  let id = 0;
  const waiting = new Map<number, (r: Record<string, unknown>) => void>();
  ws.onmessage = (e) => {
    const m = JSON.parse(String(e.data));
    waiting.get(m.id)?.(m.result);
    waiting.delete(m.id);
  };
  const call = (method: string, params: object = {}) => new Promise<Record<string, unknown>>((resolve) => {
    waiting.set(++id, resolve);
    ws.send(JSON.stringify({ id, method, params }));
  });
  await call('HeapProfiler.collectGarbage');
  const usage = await call('Runtime.getHeapUsage');
  const buffers = await call('Runtime.evaluate', { expression: 'process.memoryUsage().arrayBuffers', returnByValue: true });
  ws.close();
  return { heap: (usage.usedSize as number) / 1048576, arrayBuffers: (buffers.result as { value: number }).value / 1048576 };
}

const pct = (xs: number[], q: number) => (xs.length ? Math.round(quantile(xs, q)) : NaN);

// Ctrl-C or a kill ends the run through process.exit, whose hook stops the throwaway PostgreSQL.
for (const sig of ['SIGINT', 'SIGTERM'] as const) process.once(sig, () => process.exit(130));

async function main(): Promise<void> {
  const logger = createLogger('warn');
  const server = process.env.DATABASE_URL ? undefined : await startThrowawayPostgres('cansight-fleet', logger);
  const databaseUrl = process.env.DATABASE_URL ?? server!.url;
  const pool = createPool(databaseUrl, { max: 4 });
  let service: ReturnType<typeof spawn> | undefined;
  try {
    await migrate(pool, logger);
    const units = createUnitsRepository(pool);
    for (let u = 0; u < UNITS; u++) {
      if (!(await units.exists(unitId(u)))) await units.create({ id: unitId(u), name: `Fleet unit ${u}`, site: `Bench site ${u % 40}` }, unitConfig, 'bench');
    }
    const key = (await createKeysRepository(pool).create('ingest', null, 'fleet bench')).key;
    const port = await freePort();
    const profile = process.env.BENCH_PROFILE_DIR ? ['--cpu-prof', `--cpu-prof-dir=${process.env.BENCH_PROFILE_DIR}`] : [];
    const inspectPort = process.env.BENCH_HEAP === '1' ? await freePort() : 0;
    if (inspectPort) profile.push(`--inspect=127.0.0.1:${inspectPort}`);
    service = spawn(process.execPath, [...profile, 'bin/cansight.mjs', 'start', '--no-demo'], {
      env: { ...process.env, DATABASE_URL: databaseUrl, PORT: String(port), LOG_LEVEL: 'warn', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000' },
      stdio: ['ignore', 'ignore', 'inherit'],
    });
    const origin = `http://127.0.0.1:${port}`;
    for (let i = 0; ; i++) {
      const ok = await fetch(`${origin}/ready`).then((r) => r.ok, () => false);
      if (ok) break;
      if (i > 600) throw new Error('the service did not become ready');
      await new Promise((r) => setTimeout(r, 100));
    }
    const pm = postmasterPid(server?.dataDir);
    const agent = new Agent({ connections: 16 });
    const post = async (body: string) => {
      const t0 = performance.now();
      const res = await request(`${origin}/v1/rings`, { method: 'POST', dispatcher: agent, headers: { authorization: `Bearer ${key}`, 'content-type': 'application/x-ndjson' }, body });
      const text = await res.body.text();
      if (res.statusCode !== 200) throw new Error(`idle request: ${res.statusCode} ${text}`);
      return performance.now() - t0;
    };
    // Idle cost: the same number of rings, of one unit or of every unit (times well before the load's).
    const idleBase = Math.floor(Date.now() / 1000) * 1000 - 3 * 86_400_000;
    const oneUnit: number[] = [];
    const allUnits: number[] = [];
    for (let k = 0; k < 5; k++) {
      let single = '';
      for (let i = 0; i < UNITS; i++) single += line(0, new Date(idleBase + (k * UNITS + i) * 1000).toISOString(), i);
      oneUnit.push(await post(single));
      let spread = '';
      for (let u = 0; u < UNITS; u++) spread += line(u, new Date(idleBase + 86_400_000 + k * 1000).toISOString(), k);
      allUnits.push(await post(spread));
    }
    // Let the worker analyse what the idle requests stored before the load starts.
    for (let i = 0; i < 600; i++) {
      const { rows } = await pool.query(`SELECT count(*)::int AS n FROM analysis_progress WHERE unit_id LIKE 'fleet-%' AND watermark_ts >= $1`, [new Date(idleBase + 86_400_000 + 4000)]);
      if (rows[0].n === UNITS) break;
      await new Promise((r) => setTimeout(r, 100));
    }
    const idleOneMs = Math.round(quantile(oneUnit, 0.5));
    const idleAllMs = Math.round(quantile(allUnits, 0.5));
    log(`idle: ${UNITS} rings of one unit ${idleOneMs} ms, ${UNITS} rings of ${UNITS} units ${idleAllMs} ms (median of 5; ratio ${(idleAllMs / idleOneMs).toFixed(2)})`);
    log(`fleet: ${UNITS} units × ${TC} thermocouples at 1 Hz for ${SECONDS} s, one NDJSON request a second (service pid ${service.pid})`);

    const replies: number[] = [];
    const lags: number[] = [];
    const sent: Array<{ tsMs: number; sentAt: number; analysed: boolean }> = [];
    const memory: Array<{ s: number; rssMiB: number }> = [];
    const heap: number[] = [];
    const arrayBuffers: number[] = [];
    let failures = 0;
    let overlapping = 0;
    let inFlight = 0;
    const cpu0 = { service: procStat(service.pid!).cpuS, pg: postgresCpuS(pm) };
    memory.push({ s: 0, rssMiB: procStat(service.pid!).rssMiB });
    const started = Date.now();
    const firstSecond = Math.ceil(started / 1000) * 1000;
    const pending: Promise<void>[] = [];
    let polling = true;
    const poller = (async () => {
      while (polling) {
        const { rows } = await pool.query(`SELECT count(*)::int AS n, min(watermark_ts) AS w FROM analysis_progress WHERE unit_id LIKE 'fleet-%'`);
        const now = performance.now();
        const w = rows[0].n === UNITS && rows[0].w ? (rows[0].w as Date).getTime() : -Infinity;
        for (const b of sent) if (!b.analysed && b.tsMs <= w) {
          b.analysed = true;
          lags.push(now - b.sentAt);
        }
        await new Promise((r) => setTimeout(r, 100));
      }
    })();
    for (let s = 0; s < SECONDS; s++) {
      const tsMs = firstSecond + s * 1000;
      const wait = tsMs - Date.now();
      if (wait > 0) await new Promise((r) => setTimeout(r, wait));
      const tsIso = new Date(tsMs).toISOString();
      let body = '';
      for (let u = 0; u < UNITS; u++) body += line(u, tsIso, s);
      if (inFlight > 0) overlapping++;
      inFlight++;
      const t0 = performance.now();
      sent.push({ tsMs, sentAt: t0, analysed: false });
      pending.push(
        request(`${origin}/v1/rings`, { method: 'POST', dispatcher: agent, headers: { authorization: `Bearer ${key}`, 'content-type': 'application/x-ndjson' }, body })
          .then(async (res) => {
            const text = await res.body.text();
            replies.push(performance.now() - t0);
            if (res.statusCode !== 200 || JSON.parse(text).accepted !== UNITS) failures++;
          })
          .catch(() => void failures++)
          .finally(() => void inFlight--),
      );
      if ((s + 1) % 30 === 0) {
        memory.push({ s: s + 1, rssMiB: procStat(service.pid!).rssMiB });
        if (inspectPort) {
          const live = await liveMemoryMiB(inspectPort);
          heap.push(Math.round(live.heap));
          arrayBuffers.push(Math.round(live.arrayBuffers));
        }
      }
    }
    await Promise.all(pending);
    // Let analysis catch up with the last second (at most 30 s more).
    for (let i = 0; i < 300 && sent.some((b) => !b.analysed); i++) await new Promise((r) => setTimeout(r, 100));
    polling = false;
    await poller;
    const elapsedS = (Date.now() - started) / 1000;
    const rings = UNITS * SECONDS;
    const end = procStat(service.pid!);
    const serviceCpu = end.cpuS - cpu0.service;
    const pgCpu = postgresCpuS(pm) - cpu0.pg;
    memory.push({ s: SECONDS, rssMiB: end.rssMiB });
    const half = memory.filter((m) => m.s >= SECONDS / 2);
    const growth = half.length >= 2 ? half[half.length - 1].rssMiB - half[0].rssMiB : NaN;
    // Live memory (heap and array buffers) from the first sample of the last half to the last one.
    const live = heap.map((h, i) => h + arrayBuffers[i]);
    const liveHalf = live.filter((_, i) => 30 * (i + 1) >= SECONDS / 2);
    const liveGrowth = liveHalf.length >= 2 ? liveHalf[liveHalf.length - 1] - liveHalf[0] : NaN;
    const out = {
      bench: 'fleet',
      units: UNITS,
      seconds: SECONDS,
      idleOneUnitMs: idleOneMs,
      idleManyUnitsMs: idleAllMs,
      idleRatio: Math.round((idleAllMs / idleOneMs) * 100) / 100,
      thermocouples: TC,
      requests: SECONDS,
      failedRequests: failures,
      overlappingRequests: overlapping,
      unanalysedRequests: sent.filter((b) => !b.analysed).length,
      replyP50Ms: pct(replies, 0.5),
      replyP99Ms: pct(replies, 0.99),
      lagP50Ms: pct(lags, 0.5),
      lagP99Ms: pct(lags, 0.99),
      serviceCpuUsPerRing: Math.round((serviceCpu * 1e6) / rings),
      postgresCpuUsPerRing: Math.round((pgCpu * 1e6) / rings),
      serviceCpuShare: Math.round((serviceCpu / elapsedS) * 100) / 100,
      postgresCpuShare: Math.round((pgCpu / elapsedS) * 100) / 100,
      rssStartMiB: Math.round(memory[0].rssMiB),
      rssEndMiB: Math.round(end.rssMiB),
      rssGrowthLastHalfMiB: Math.round(growth * 10) / 10,
      rssEvery30sMiB: memory.map((m) => Math.round(m.rssMiB)),
      ...(inspectPort ? { liveHeapEvery30sMiB: heap, arrayBuffersEvery30sMiB: arrayBuffers, liveGrowthLastHalfMiB: liveGrowth } : {}),
    };
    log(`reply p50 ${out.replyP50Ms} ms, p99 ${out.replyP99Ms} ms; analysis lag p50 ${out.lagP50Ms} ms, p99 ${out.lagP99Ms} ms; ${overlapping} of ${SECONDS} requests sent while one was still unanswered; ${failures} failed`);
    log(`CPU per ring: service ${out.serviceCpuUsPerRing} µs, PostgreSQL ${out.postgresCpuUsPerRing} µs (of a core: service ${out.serviceCpuShare}, PostgreSQL ${out.postgresCpuShare})`);
    log(`service memory (RSS, MiB, every 30 s): ${out.rssEvery30sMiB.join(' ')}; growth over the last half ${out.rssGrowthLastHalfMiB} MiB`);
    if (inspectPort) {
      log(`service live heap after a full collection (MiB, every 30 s): ${heap.join(' ')}`);
      log(`service array buffers (typed-array data outside the heap) after it (MiB, every 30 s): ${arrayBuffers.join(' ')}; heap and array buffers grew ${liveGrowth} MiB over the last half`);
    }
    log(JSON.stringify(out));
    await agent.close();
  } finally {
    if (service && service.exitCode === null) {
      service.kill('SIGTERM');
      await new Promise((r) => service!.once('exit', r));
    }
    await pool.end();
    await server?.stop();
  }
}

await main();
