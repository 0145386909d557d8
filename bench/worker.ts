/**
 * Worker benchmark, on one database (DATABASE_URL if set, else an embedded PostgreSQL in a
 * temporary directory):
 *   (a) backfill: the demo fleet's history (services/sim) stored with binary COPY, then
 *       analysed by one worker through the whole pipeline (read rings, analyse, write analysis
 *       and rollups, advance the watermark, apply alert rules), rings per second from start to
 *       the last ring analysed; beside it the core's own rate (prepareUnit + analyseRing on the
 *       same rings, in this process) and their ratio;
 *   (b) alert latency: 200 units each sending one ring per second for 60 s over HTTP ingest
 *       (API and ingest in this process, the worker as a `cansight worker` process), with a cold
 *       chamber injected at known instants on a quarter of them; for each, the time from the
 *       ingest 2xx of the first faulty ring at or after the on-delay to the alert being listed
 *       by GET /v1/alerts, p50 and p99.
 * The last line printed is one JSON object.
 *
 *   npm run bench:worker     BENCH_DAYS (default 30), BENCH_UNITS (default 200), BENCH_SECONDS (default 60),
 *                            BENCH_ONLY (backfill | latency), BENCH_WORKER_NODE_ARGS (node options of the worker process),
 *                            BENCH_BATCH (rings per transaction; default the product's), BENCH_CONCURRENCY
 */
import os from 'node:os';
import { readFileSync } from 'node:fs';
import path from 'node:path';
import { Worker as Thread } from 'node:worker_threads';
import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { createRequire } from 'node:module';
import { analyseRing, correctedLoadFraction, prepareUnit } from '../services/core/index.ts';
import { buildApp } from '../services/cli/app.ts';
import { loadConfig } from '../services/db/config.ts';
import { startThrowawayPostgres } from '../services/db/embedded.ts';
import { createKeysRepository } from '../services/db/keys.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool, type Pool } from '../services/db/pool.ts';
import { RingCopyEncoder, copyRingsRaw } from '../services/db/rings.ts';
import { createUnitsRepository } from '../services/db/units.ts';
import { analysisTotals, ringsAnalysedTotal } from '../services/db/progress.ts';
import { demoFleet, simulateUnit, type RingBatch, type SimUnit } from '../services/sim/index.ts';
import { startWorker } from '../services/worker/index.ts';

const DAYS = Number(process.env.BENCH_DAYS ?? 30);
const UNITS = Number(process.env.BENCH_UNITS ?? 200);
const SECONDS = Number(process.env.BENCH_SECONDS ?? 60);
const ON_DELAY_S = Number(process.env.BENCH_ON_DELAY_S ?? 10);
const say = (line: string) => process.stderr.write(line + '\n');

let postmasterPid: number | null = null;

/**
 * CPU seconds used so far by the embedded PostgreSQL: the postmaster, its reaped children and
 * its live children (Linux /proc; 0 when unknown, e.g. with DATABASE_URL).
 */
function postgresCpuS(): number {
  if (postmasterPid === null) return 0;
  const fs = createRequire(import.meta.url)('node:fs') as typeof import('node:fs');
  const fields = (pid: string) => {
    const stat = fs.readFileSync(`/proc/${pid}/stat`, 'utf8');
    return stat.slice(stat.lastIndexOf(')') + 2).split(' ');
  };
  const tick = 100;
  try {
    const f = fields(String(postmasterPid));
    let total = (Number(f[11]) + Number(f[12]) + Number(f[13]) + Number(f[14])) / tick;
    for (const pid of fs.readdirSync('/proc')) {
      if (!/^\d+$/.test(pid)) continue;
      try {
        const c = fields(pid);
        if (Number(c[1]) === postmasterPid) total += (Number(c[11]) + Number(c[12])) / tick;
      } catch {
        // ended meanwhile
      }
    }
    return total;
  } catch {
    return 0;
  }
}

/** CPU seconds used so far by one process (Linux /proc; 0 when unknown). */
function processCpuS(pid: number | undefined): number {
  if (pid === undefined) return 0;
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    return (Number(f[11]) + Number(f[12])) / 100;
  } catch {
    return 0;
  }
}

async function database(): Promise<{ adminUrl: string; stop: () => Promise<void> }> {
  if (process.env.DATABASE_URL) return { adminUrl: process.env.DATABASE_URL, stop: async () => undefined };
  const server = await startThrowawayPostgres('cansight-bench-worker', createLogger('warn'));
  try {
    postmasterPid = Number(readFileSync(path.join(server.dataDir, 'postmaster.pid'), 'utf8').split('\n')[0]);
  } catch {
    postmasterPid = null;
  }
  return { adminUrl: server.url, stop: () => server.stop() };
}

function databaseUrl(adminUrl: string, name: string): string {
  const u = new URL(adminUrl);
  u.pathname = '/' + name;
  return u.toString();
}

async function freshDatabase(adminUrl: string, name: string): Promise<Pool> {
  const admin = createPool(adminUrl, { max: 1 });
  await admin.query(`DROP DATABASE IF EXISTS ${name} WITH (FORCE)`);
  await admin.query(`CREATE DATABASE ${name}`);
  await admin.end();
  const u = new URL(adminUrl);
  u.pathname = '/' + name;
  const pool = createPool(u.toString(), { max: 24, statementTimeoutMs: 600_000 });
  await migrate(pool);
  if (process.env.BENCH_ASYNC_COMMIT) await pool.query(`ALTER DATABASE ${name} SET synchronous_commit = off`);
  return pool;
}

async function registerSimUnit(pool: Pool, unit: SimUnit): Promise<void> {
  const { id, name, site, ...config } = unit.config;
  await createUnitsRepository(pool).create({ id, name, site }, config, 'bench');
}

async function storeBatch(pool: Pool, b: RingBatch): Promise<void> {
  const m = b.thermocoupleCount;
  const enc = new RingCopyEncoder();
  for (let r = 0; r < b.count; r++) {
    enc.add({
      unitId: b.unitId, tsMs: b.tsMs[r], loadMw: b.loadMw[r], ambientC: b.ambientC[r], ambientKPa: b.ambientKPa[r], speedPct: b.speedPct[r],
      cdtC: null, cdpKPa: null, fuelFlowKgS: b.fuelFlowKgS[r], flameDetected: b.flameDetected[r] === 1, exhaustC: b.exhaustC.subarray(r * m, (r + 1) * m),
    });
    if (enc.count === 20_000) {
      await copyRingsRaw(pool, enc);
      enc.reset();
    }
  }
  if (enc.count) await copyRingsRaw(pool, enc);
}

/** (a) Backfill throughput and the core's own rate on the same rings. */
async function backfill(adminUrl: string): Promise<{ backfillRingsPerS: number; coreRingsPerS: number; rings: number }> {
  const pool = await freshDatabase(adminUrl, 'bench_backfill');
  const end = '2026-10-01T00:00:00Z';
  const from = new Date(Date.parse(end) - DAYS * 86_400_000).toISOString();
  await pool.query('SELECT ensure_ring_partitions($1, $2)', [from, end]);
  const fleet = demoFleet(end);
  const batches: { unit: SimUnit; b: RingBatch }[] = [];
  for (const unit of fleet) {
    await registerSimUnit(pool, unit);
    const b = simulateUnit(unit, { from, to: end, seed: 11 }).batch();
    batches.push({ unit, b });
    await storeBatch(pool, b);
  }
  const rings = batches.reduce((s, x) => s + x.b.count, 0);
  say(`backfill: ${fleet.length} units, ${DAYS} days, ${rings} rings stored`);

  // The core's own rate on the same rings (best of two passes).
  let coreBest = 0;
  for (let pass = 0; pass < 2; pass++) {
    let n = 0;
    const t0 = performance.now();
    for (const { unit, b } of batches) {
      const ctx = prepareUnit(unit.config);
      const m = b.thermocoupleCount;
      for (let r = 0; r < b.count; r++) {
        const load = correctedLoadFraction(b.loadMw[r], b.ambientC[r], b.ambientKPa[r], unit.config);
        analyseRing(ctx, b.exhaustC.subarray(r * m, (r + 1) * m), load);
        n++;
      }
    }
    coreBest = Math.max(coreBest, n / ((performance.now() - t0) / 1000));
  }

  // The product's defaults, unless BENCH_BATCH / BENCH_CONCURRENCY say otherwise.
  const config = loadConfig({
    LOG_LEVEL: process.env.BENCH_LOG_LEVEL ?? 'warn',
    ...(process.env.BENCH_BATCH ? { CANSIGHT_WORKER_BATCH_RINGS: process.env.BENCH_BATCH } : {}),
    CANSIGHT_WORKER_CONCURRENCY: process.env.BENCH_CONCURRENCY ?? String(Math.max(2, os.cpus().length)),
  });
  const logger = createLogger(config.logLevel);
  const t0 = performance.now();
  const cpu0 = process.cpuUsage();
  const pg0 = postgresCpuS();
  const worker = await startWorker({ pool, logger, config, workerId: 'bench-backfill' });
  // The worker's counters commit with the analysis they count: polling them costs the database
  // nothing, where counting ring_analysis every 20 ms would scan the growing table each time.
  while ((await ringsAnalysedTotal(pool)) < rings) await new Promise((r) => setTimeout(r, 20));
  const seconds = (performance.now() - t0) / 1000;
  const cpu = process.cpuUsage(cpu0);
  const pgCpu = postgresCpuS() - pg0;
  const totals = await analysisTotals(pool);
  if (totals.analysed !== rings || totals.inOrderBatchRings !== rings) throw new Error(`backfill: ${totals.analysed} analysis rows and ${totals.inOrderBatchRings} rings in batches for ${rings} rings`);
  say(`backfill CPU per ring: worker process ${Math.round((cpu.user + cpu.system) / rings)} µs, PostgreSQL ${Math.round((pgCpu * 1e6) / rings)} µs (wall ${Math.round((seconds * 1e6) / rings)} µs on ${os.cpus().length} cores)`);
  await worker.stop();
  await pool.end();
  return { backfillRingsPerS: rings / seconds, coreRingsPerS: coreBest, rings };
}

const CLIENT_SOURCE = `
const { workerData, parentPort } = require('node:worker_threads');
const { createRequire } = require('node:module');
const { request, Agent } = createRequire(workerData.from)('undici');
const agent = new Agent({ connections: 64, pipelining: 1 });
const { url, key, units, seconds, faults, tc } = workerData;
const sleep = (ms) => new Promise((r) => setTimeout(r, ms));
function ring(unitIdx, tsMs, faulty) {
  const ex = [];
  for (let k = 0; k < tc; k++) {
    let v = 560 + 6 * Math.sin((k / tc) * 2 * Math.PI + unitIdx) + (((tsMs / 1000 + k * 7 + unitIdx) % 5) - 2) * 0.2;
    if (faulty && (k === 4 || k === 5)) v -= 220;
    ex.push(Math.round(v * 10) / 10);
  }
  return JSON.stringify({ rings: [{ ts: new Date(tsMs).toISOString(), loadMw: 20, ambientC: 15, ambientKPa: 101.3, speedPct: 100, exhaustC: ex }] });
}
(async () => {
  const start = Math.ceil(Date.now() / 1000) * 1000 + 1000;
  const triggers = {};
  const pending = [];
  for (let s = 0; s < seconds; s++) {
    const tsMs = start + s * 1000;
    const wait = tsMs - Date.now();
    if (wait > 0) await sleep(wait);
    for (let u = 0; u < units.length; u++) {
      const f = faults[units[u]];
      const faulty = f !== undefined && s >= f;
      const isTrigger = f !== undefined && s === f + workerData.onDelayS;
      pending.push(request(url + '/v1/units/' + units[u] + '/rings', { method: 'POST', dispatcher: agent, headers: { authorization: 'Bearer ' + key, 'content-type': 'application/json' }, body: ring(u, tsMs, faulty) })
        .then(async (res) => {
          const text = await res.body.text();
          if (res.statusCode !== 200) throw new Error('HTTP ' + res.statusCode + ': ' + text.slice(0, 200));
          if (isTrigger) triggers[units[u]] = Date.now();
        }));
    }
  }
  await Promise.all(pending);
  parentPort.postMessage({ triggers });
})().catch((err) => { parentPort.postMessage({ error: String(err && err.stack || err) }); });
`;

/** (b) Alert latency over HTTP ingest. */
async function alertLatency(adminUrl: string): Promise<{ p50: number; p99: number; measured: number; faulty: number }> {
  const pool = await freshDatabase(adminUrl, 'bench_alerts');
  const dbUrl = databaseUrl(adminUrl, 'bench_alerts');
  const config = loadConfig({
    LOG_LEVEL: process.env.BENCH_LOG_LEVEL ?? 'warn',
    HOST: '127.0.0.1',
    PORT: '0',
    CANSIGHT_ALERT_ON_DELAY_S: String(ON_DELAY_S),
    CANSIGHT_RATE_LIMIT_PER_MIN: '10000000',
  });
  const logger = createLogger(config.logLevel);
  const units: string[] = [];
  const repo = createUnitsRepository(pool);
  for (let i = 0; i < UNITS; i++) {
    const id = `lat-${String(i).padStart(3, '0')}`;
    units.push(id);
    await repo.create(
      { id, name: `Latency unit ${i}`, site: 'Bench' },
      { ratedPowerMw: 24, thermocouples: { count: 18, firstAngleDeg: 10 }, chambers: { count: 10, firstAngleDeg: 0 }, swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] }, temperatureUnit: 'C' },
      'bench',
    );
  }
  // A quarter of the units get a cold chamber, at instants spread over the run.
  const faults: Record<string, number> = {};
  const lastFault = Math.max(1, SECONDS - ON_DELAY_S - 8);
  for (let i = 0; i < UNITS; i += 4) faults[units[i]] = 3 + (i * 7) % Math.max(1, lastFault - 3);
  const { key } = await createKeysRepository(pool).create('admin', null, 'bench');
  const app = await buildApp({ config, pool, logger, parts: { api: true, ingest: true } });
  const address = await app.listen({ host: '127.0.0.1', port: 0 });
  // The worker in a process of its own (as `cansight worker` runs beside `cansight api`/`ingest`).
  // BENCH_WORKER_NODE_ARGS: extra node options for the worker process, e.g. "--cpu-prof --cpu-prof-dir=/tmp/prof".
  const nodeArgs = (process.env.BENCH_WORKER_NODE_ARGS ?? '').split(/\s+/).filter(Boolean);
  const workerProc = spawn(process.execPath, [...nodeArgs, fileURLToPath(new URL('../bin/cansight.mjs', import.meta.url)), 'worker'], {
    env: {
      ...process.env,
      DATABASE_URL: dbUrl,
      LOG_LEVEL: config.logLevel,
      CANSIGHT_WORKER_ID: 'bench-latency',
      CANSIGHT_ALERT_ON_DELAY_S: String(ON_DELAY_S),
      ...(process.env.BENCH_CONCURRENCY ? { CANSIGHT_WORKER_CONCURRENCY: process.env.BENCH_CONCURRENCY } : {}),
    },
    stdio: ['ignore', process.env.BENCH_LOG_LEVEL ? 'inherit' : 'ignore', 'inherit'],
  });
  await new Promise((r) => setTimeout(r, 200));
  // Wait until the worker holds every unit.
  for (;;) {
    const { rows } = await pool.query(`SELECT count(*)::int AS n FROM unit_claims WHERE worker_id = 'bench-latency' AND lease_until > now()`);
    if (rows[0].n >= UNITS) break;
    if (workerProc.exitCode !== null) throw new Error('the worker process ended early');
    await new Promise((r) => setTimeout(r, 100));
  }

  const seen = new Map<string, number>();
  let polling = true;
  const poller = (async () => {
    while (polling) {
      const res = await app.inject({ method: 'GET', url: '/v1/alerts?state=active&limit=200', headers: { authorization: `Bearer ${key}` } });
      const now = Date.now();
      if (res.statusCode === 200) for (const a of res.json().alerts as { unitId: string }[]) if (!seen.has(a.unitId)) seen.set(a.unitId, now);
      await new Promise((r) => setTimeout(r, 100));
    }
  })();

  const cpuAt0 = { worker: processCpuS(workerProc.pid), pg: postgresCpuS(), self: process.cpuUsage(), wall: performance.now() };
  const thread = new Thread(CLIENT_SOURCE, {
    eval: true,
    workerData: { from: createRequire(import.meta.url).resolve('undici'), url: address, key, units, seconds: SECONDS, faults, tc: 18, onDelayS: ON_DELAY_S },
  });
  const { triggers, error } = await new Promise<{ triggers: Record<string, number>; error?: string }>((resolve, reject) => {
    thread.once('message', resolve);
    thread.once('error', reject);
  });
  await thread.terminate();
  if (error) throw new Error(error);
  {
    const wall = (performance.now() - cpuAt0.wall) / 1000;
    const self = process.cpuUsage(cpuAt0.self);
    const share = (s: number) => `${Math.round((100 * s) / wall)} %`;
    say(
      `alert latency CPU over the ${Math.round(wall)} s of sending (share of one core): worker process ${share(processCpuS(workerProc.pid) - cpuAt0.worker)}, ` +
        `PostgreSQL ${share(postgresCpuS() - cpuAt0.pg)}, API + ingest + client ${share((self.user + self.system) / 1e6)}; load average ${os.loadavg()[0].toFixed(1)}`,
    );
  }
  // Give the last alerts time to appear.
  const deadline = Date.now() + 10_000;
  while (Date.now() < deadline && Object.keys(triggers).some((u) => !seen.has(u))) await new Promise((r) => setTimeout(r, 50));
  polling = false;
  await poller;
  const lat: number[] = [];
  for (const [u, t] of Object.entries(triggers)) lat.push(seen.has(u) ? Math.max(0, (seen.get(u) as number) - t) : Infinity);
  const falseAlarms = [...seen.keys()].filter((u) => faults[u] === undefined).length;
  say(`alert latency: ${Object.keys(faults).length} faulty units, ${lat.filter(Number.isFinite).length} alerts seen, ${falseAlarms} units alerted without a fault`);
  lat.sort((a, b) => a - b);
  const q = (p: number) => lat[Math.min(lat.length - 1, Math.max(0, Math.ceil(p * lat.length) - 1))];
  workerProc.kill('SIGTERM');
  await new Promise((r) => workerProc.once('exit', r));
  await app.close();
  await pool.end();
  return { p50: q(0.5), p99: q(0.99), measured: lat.length, faulty: Object.keys(faults).length };
}

async function main(): Promise<void> {
  const db = await database();
  try {
    const only = process.env.BENCH_ONLY;
    const a = only === 'latency' ? { backfillRingsPerS: NaN, coreRingsPerS: NaN, rings: 0 } : await backfill(db.adminUrl);
    say(`backfill: ${Math.round(a.backfillRingsPerS)} rings/s through the pipeline; core alone ${Math.round(a.coreRingsPerS)} rings/s`);
    const b = only === 'backfill' ? { p50: NaN, p99: NaN, measured: 0, faulty: 0 } : await alertLatency(db.adminUrl);
    say(`alert latency beyond the ${ON_DELAY_S} s on-delay: p50 ${Math.round(b.p50)} ms, p99 ${Math.round(b.p99)} ms`);
    const r = (x: number) => (Number.isFinite(x) ? Math.round(x) : null);
    process.stdout.write(
      JSON.stringify({
        bench: 'worker',
        backfillRingsPerS: r(a.backfillRingsPerS),
        coreRingsPerS: r(a.coreRingsPerS),
        ratio: Math.round((a.backfillRingsPerS / a.coreRingsPerS) * 1000) / 1000,
        alertP50Ms: r(b.p50),
        alertP99Ms: r(b.p99),
      }) + '\n',
    );
  } finally {
    await db.stop();
  }
}

await main();
