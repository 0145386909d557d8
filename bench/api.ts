/**
 * Read API benchmark: 1,000 units with a latest analysis each (synthetic rows written straight
 * into the worker's tables), open alerts on a fifth of them, and a year of hourly and daily
 * rollups on one unit. Measures GET /v1/fleet and GET /v1/units/:id/status with autocannon at
 * 50 concurrent clients (p50, p99, requests per second), and a year of chamber trend read from
 * the rollups (JSON and SVG). The clients send the Accept-Encoding a browser sends, so the
 * fleet board comes gzip; the same board uncompressed is measured beside it (not a goal). Uses DATABASE_URL if set, else an embedded PostgreSQL in a
 * temporary directory. The last line printed is one JSON object {"bench":"api",…}.
 * Goals: p99 under 50 ms for both routes; a year of trend under 200 ms.
 * Beside the latencies it prints where the time went during each route's run: how busy the
 * server thread was, its GC and loop delay, requests waiting for a database connection, and the
 * PostgreSQL CPU per request (embedded server only). BENCH_CPU_PROFILE=DIR also writes a V8 CPU
 * profile of the server thread per route (DIR/fleet.cpuprofile, DIR/status.cpuprofile).
 * BENCH_WRITES_PER_S=N commits N analysis-progress updates per second while each route runs
 * (the routes' cached answers then go stale as they would with a worker analysing); the default
 * is none, and the JSON line says which.
 */
import autocannon from 'autocannon';
import { mkdirSync, readdirSync, readFileSync } from 'node:fs';
import path from 'node:path';
import { Worker } from 'node:worker_threads';
import type { PhaseStats } from './api-server.ts';
import { loadConfig } from '../services/db/config.ts';
import { startThrowawayPostgres } from '../services/db/embedded.ts';
import { createKeysRepository } from '../services/db/keys.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool } from '../services/db/pool.ts';
import { insertAlerts, insertAnalyses, insertBaseline, insertRollups, type SyntheticRollup } from '../services/db/synthetic.ts';
import { createUnitsRepository } from '../services/db/units.ts';
import type { UnitConfig } from '../services/core/types.ts';

const UNITS = Number(process.env.BENCH_UNITS ?? 1000);
const CONNECTIONS = 50;
const DURATION_S = Number(process.env.BENCH_DURATION_S ?? 10);
const WRITES_PER_S = Number(process.env.BENCH_WRITES_PER_S ?? 0);
const TREND_RUNS = 20;
const HOUR = 3_600_000;
const DAY = 86_400_000;

const config: UnitConfig = {
  ratedPowerMw: 42,
  thermocouples: { count: 18, firstAngleDeg: 10 },
  chambers: { count: 10, firstAngleDeg: 0 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
};

const log = (line: string) => process.stdout.write(line + '\n');

function percentile(sorted: number[], q: number): number {
  return sorted[Math.min(sorted.length - 1, Math.floor(q * sorted.length))];
}

/** What a browser or an HTTP client library sends; the fleet board is gzip to such clients. */
const ACCEPT_ENCODING = 'gzip, deflate, br';

async function load(url: string, key: string, paths: () => string, acceptEncoding: string): Promise<{ p50: number; p99: number; rps: number; errors: number; non2xx: number; bytesPerReq: number }> {
  const result = await autocannon({
    url,
    connections: CONNECTIONS,
    duration: DURATION_S,
    headers: { authorization: `Bearer ${key}`, 'accept-encoding': acceptEncoding },
    requests: [{ method: 'GET', setupRequest: (req) => ({ ...req, path: paths() }) }],
  });
  return { p50: result.latency.p50, p99: result.latency.p99, rps: Math.round(result.requests.average), errors: result.errors, non2xx: result.non2xx, bytesPerReq: Math.round(result.throughput.total / Math.max(1, result.requests.total)) };
}

/** CPU seconds used so far by a PostgreSQL server and its backends (Linux /proc), or null. */
function postgresCpuS(dataDir: string | undefined): number | null {
  if (!dataDir) return null;
  try {
    const postmaster = Number(readFileSync(path.join(dataDir, 'postmaster.pid'), 'utf8').split('\n')[0]);
    let ticks = 0;
    for (const d of readdirSync('/proc')) {
      if (!/^\d+$/.test(d)) continue;
      let stat: string;
      try {
        stat = readFileSync(`/proc/${d}/stat`, 'utf8');
      } catch {
        continue;
      }
      const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
      // f[1] = ppid, f[11] = utime, f[12] = stime (fields 4, 14, 15 of proc(5)), in clock ticks;
      // the postmaster's f[13] = cutime, f[14] = cstime count the backends that have ended.
      if (Number(d) === postmaster) ticks += Number(f[11]) + Number(f[12]) + Number(f[13]) + Number(f[14]);
      else if (Number(f[1]) === postmaster) ticks += Number(f[11]) + Number(f[12]);
    }
    return ticks / 100;
  } catch {
    return null;
  }
}

async function main(): Promise<void> {
  const logger = createLogger(process.env.LOG_LEVEL ?? 'warn', { component: 'bench' });
  const server = process.env.DATABASE_URL ? undefined : await startThrowawayPostgres('cansight-bench-api', logger);
  const url = process.env.DATABASE_URL ?? server!.url;
  const pool = createPool(url, { max: 24 });
  try {
    await migrate(pool, logger);
    const now = Date.now();
    const tag = now.toString(36);
    const ids = Array.from({ length: UNITS }, (_, i) => `bench-${tag}-${i}`);
    log(`api benchmark: ${UNITS} units, ${CONNECTIONS} concurrent clients, ${DURATION_S} s per route${WRITES_PER_S ? `, ${WRITES_PER_S} progress updates per second meanwhile` : ''}`);
    let t0 = performance.now();
    const units = createUnitsRepository(pool);
    for (const id of ids) await units.create({ id, name: `Bench unit ${id.split('-').at(-1)}`, site: 'Bench' }, config, 'bench');
    for (let i = 0; i < ids.length; i++) {
      const dev = Array.from({ length: 18 }, (_, k) => Math.sin(k + i) * 6);
      await insertAnalyses(pool, ids[i], [
        { tsMs: now - 60_000 - (i % 60) * 1000, loadFraction: 0.6 + (i % 40) / 100, spreadC: 20 + (i % 25), spreadLimitC: 40, validity: dev.map((_, k) => (i % 17 === 0 && k === 3 ? 2 : 0)), tcDeviationC: dev, chamberDeviationC: Array.from({ length: 10 }, (_, k) => Math.cos(k + i) * 4), swirlDeg: 70 },
      ]);
      if (i % 5 === 0) {
        await insertAlerts(pool, ids[i], [
          { kind: 'spread_high', grade: (['notice', 'warning', 'alarm', 'critical'] as const)[i % 4], raisedAtMs: now - HOUR, message: 'synthetic spread alert' },
          ...(i % 10 === 0 ? [{ kind: 'thermocouple_fault', grade: 'warning' as const, thermocouple: 4, raisedAtMs: now - 2 * HOUR, message: 'synthetic thermocouple alert' }] : []),
        ]);
      }
    }
    // A year of rollups for the first unit: hourly and daily, every metric the worker writes.
    const trendUnit = ids[0];
    const rows: SyntheticRollup[] = [];
    const metrics: Array<[string, number]> = [['spread', 1], ['spread_excl1', 1], ['spread_excl2', 1], ['ring_mean', 1], ['load_fraction', 1], ['chamber_deviation', 10], ['chamber_residual', 10], ['tc_deviation', 18], ['tc_residual', 18], ['tc_invalid', 18]];
    for (const [period, step, count] of [['hour', HOUR, 366 * 24], ['day', DAY, 366]] as const) {
      const end = Math.floor(now / step) * step;
      for (let j = count - 1; j >= 0; j--) {
        for (const [metric, subjects] of metrics) rows.push({ period, metric, bucketMs: end - j * step, means: Array.from({ length: subjects }, (_, k) => Math.sin(j / 50 + k) * 3) });
      }
    }
    await insertRollups(pool, trendUnit, rows);
    await insertBaseline(pool, trendUnit, 1, now - 400 * DAY, now - 380 * DAY);
    await pool.query('ANALYZE');
    log(`loaded ${UNITS} units, ${rows.length.toLocaleString('en')} rollup rows in ${((performance.now() - t0) / 1000).toFixed(1)} s`);

    // The server runs on its own thread with the product's pool size (CANSIGHT_POOL_MAX).
    const serverThread = new Worker(new URL('../services/cli/thread-entry.mjs', import.meta.url), {
      workerData: { module: new URL('./api-server.ts', import.meta.url).href, databaseUrl: url },
    });
    const base = await new Promise<string>((resolve, reject) => {
      serverThread.once('message', (m: { base: string }) => resolve(m.base));
      serverThread.once('error', reject);
    });
    const serverStopped = new Promise<void>((resolve) => serverThread.once('exit', () => resolve()));
    const key = (await createKeysRepository(pool).create('viewer', null, 'bench')).key;

    // Warm up (compiles serializers, fills the pool).
    for (let i = 0; i < 20; i++) {
      await fetch(`${base}/v1/fleet`, { headers: { authorization: `Bearer ${key}` } });
      await fetch(`${base}/v1/units/${ids[i]}/status`, { headers: { authorization: `Bearer ${key}` } });
    }
    const fleetBody = await (await fetch(`${base}/v1/fleet`, { headers: { authorization: `Bearer ${key}` } })).json() as { units: unknown[] };
    if (fleetBody.units.length !== UNITS) throw new Error(`fleet returned ${fleetBody.units.length} units, expected ${UNITS}`);

    // One route under load, with the server thread's own account of where its time went.
    const profileDir = process.env.BENCH_CPU_PROFILE;
    if (profileDir) mkdirSync(profileDir, { recursive: true });
    const ask = <T>(m: unknown, field: string) =>
      new Promise<T>((resolve) => {
        const on = (r: Record<string, unknown>) => {
          if (!(field in r)) return;
          serverThread.off('message', on);
          resolve(r[field] as T);
        };
        serverThread.on('message', on);
        serverThread.postMessage(m);
      });
    const measured = async (name: string, paths: () => string, acceptEncoding = ACCEPT_ENCODING) => {
      await ask({ cmd: 'begin', profile: profileDir ? path.resolve(profileDir, `${name}.cpuprofile`) : null }, 'begun');
      const cpu0 = process.cpuUsage();
      const pg0 = postgresCpuS(server?.dataDir);
      // BENCH_WRITES_PER_S: meanwhile, commit that many analysis-progress updates per second
      // (round the units, as the worker's batches do), so cached answers keep going stale.
      let w = 0;
      const writer = WRITES_PER_S > 0
        ? setInterval(() => {
            pool.query(`UPDATE analysis_progress SET updated_at = now() WHERE unit_id = $1`, [ids[w++ % ids.length]]).catch(() => {});
          }, 1000 / WRITES_PER_S)
        : null;
      const r = await load(base, key, paths, acceptEncoding);
      if (writer) clearInterval(writer);
      const cpu = process.cpuUsage(cpu0);
      const pg1 = postgresCpuS(server?.dataDir);
      const s = await ask<PhaseStats>({ cmd: 'end' }, 'stats');
      const requests = Math.max(1, r.rps * DURATION_S);
      const where = {
        serverBusy: s.loopBusy,
        gcMs: s.gcMs,
        loopDelayP99Ms: s.loopDelayP99Ms,
        poolWaitingMean: s.poolWaitingMean,
        poolWaitingMax: s.poolWaitingMax,
        poolMax: s.poolMax,
        // CPU per request: the server thread; this whole process (server and load generator); PostgreSQL.
        serverCpuUsPerReq: s.cpuS !== null ? Math.round((s.cpuS * 1e6) / requests) : null,
        nodeCpuUsPerReq: Math.round((cpu.user + cpu.system) / requests),
        pgCpuUsPerReq: pg0 !== null && pg1 !== null ? Math.round(((pg1 - pg0) * 1e6) / requests) : null,
      };
      log(`  server thread busy ${(where.serverBusy * 100).toFixed(0)} %, GC ${where.gcMs} ms in ${s.gcCount}, loop delay p99 ${where.loopDelayP99Ms} ms, ` +
        `waiting for a connection mean ${where.poolWaitingMean} max ${where.poolWaitingMax} (pool ${where.poolMax}); ` +
        `CPU per request: server thread ${where.serverCpuUsPerReq ?? '?'} µs, whole process ${where.nodeCpuUsPerReq} µs, PostgreSQL ${where.pgCpuUsPerReq ?? '?'} µs`);
      return { ...r, where };
    };

    const fleet = await measured('fleet', () => '/v1/fleet');
    log(`GET /v1/fleet                p50 ${fleet.p50} ms  p99 ${fleet.p99} ms  ${fleet.rps} req/s  ${fleet.bytesPerReq.toLocaleString('en')} B/reply gzip  (errors ${fleet.errors}, non-2xx ${fleet.non2xx})`);
    // The same board to clients that take no compression: reported beside, not a goal.
    const fleetPlain = await measured('fleet-plain', () => '/v1/fleet', 'identity');
    log(`GET /v1/fleet uncompressed   p50 ${fleetPlain.p50} ms  p99 ${fleetPlain.p99} ms  ${fleetPlain.rps} req/s  ${fleetPlain.bytesPerReq.toLocaleString('en')} B/reply  (errors ${fleetPlain.errors}, non-2xx ${fleetPlain.non2xx})`);
    let n = 0;
    const status = await measured('status', () => `/v1/units/${ids[n++ % ids.length]}/status`);
    log(`GET /v1/units/:id/status     p50 ${status.p50} ms  p99 ${status.p99} ms  ${status.rps} req/s  (errors ${status.errors}, non-2xx ${status.non2xx})`);

    const from = new Date(now - 365 * DAY).toISOString();
    const to = new Date(now).toISOString();
    const time = async (u: string) => {
      const ms: number[] = [];
      for (let i = 0; i < TREND_RUNS; i++) {
        t0 = performance.now();
        const res = await fetch(base + u, { headers: { authorization: `Bearer ${key}` } });
        const body = await res.text();
        if (res.status !== 200 || body.length < 100) throw new Error(`${u}: ${res.status} ${body.slice(0, 200)}`);
        ms.push(performance.now() - t0);
      }
      ms.sort((a, b) => a - b);
      return { median: Math.round(percentile(ms, 0.5) * 10) / 10, max: Math.round(ms[ms.length - 1] * 10) / 10 };
    };
    const trendJson = await time(`/v1/units/${trendUnit}/chambers/4/trend?from=${from}&to=${to}`);
    const trendSvg = await time(`/v1/units/${trendUnit}/chambers/4/trend.svg?from=${from}&to=${to}`);
    log(`a year of chamber trend      JSON median ${trendJson.median} ms (max ${trendJson.max})  SVG median ${trendSvg.median} ms (max ${trendSvg.max})`);
    serverThread.postMessage('close');
    await serverStopped;

    const goals = { p99UnderMs: 50, yearTrendUnderMs: 200 };
    const met = fleet.p99 < goals.p99UnderMs && status.p99 < goals.p99UnderMs && trendJson.median < goals.yearTrendUnderMs && trendSvg.median < goals.yearTrendUnderMs;
    log(JSON.stringify({
      bench: 'api',
      units: UNITS,
      connections: CONNECTIONS,
      durationS: DURATION_S,
      writesPerS: WRITES_PER_S,
      fleet: { p50Ms: fleet.p50, p99Ms: fleet.p99, reqPerS: fleet.rps, bytesPerReply: fleet.bytesPerReq, errors: fleet.errors + fleet.non2xx, where: fleet.where },
      fleetUncompressed: { p50Ms: fleetPlain.p50, p99Ms: fleetPlain.p99, reqPerS: fleetPlain.rps, bytesPerReply: fleetPlain.bytesPerReq, errors: fleetPlain.errors + fleetPlain.non2xx },
      status: { p50Ms: status.p50, p99Ms: status.p99, reqPerS: status.rps, errors: status.errors + status.non2xx, where: status.where },
      yearTrendMs: { json: trendJson.median, svg: trendSvg.median, jsonMax: trendJson.max, svgMax: trendSvg.max },
      goals,
      met,
    }));
  } finally {
    await pool.end();
    if (server) await server.stop();
  }
}

main().catch((err) => {
  process.stderr.write(`bench/api: ${(err as Error).stack ?? err}\n`);
  process.exitCode = 1;
});
