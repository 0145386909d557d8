/**
 * Ingest benchmark: rings per second into the ring table by three paths, on one database.
 *   (a) raw COPY: generated 24-thermocouple rings, binary-encoded and copied straight into
 *       the ring table by concurrent connections (the floor: no HTTP, no validation);
 *   (b) the JSON batch endpoint over HTTP, concurrent clients;
 *   (c) the NDJSON stream endpoint over HTTP, concurrent clients;
 * and each HTTP path's ratio to raw COPY. The HTTP clients run in a worker thread with
 * undici, their bodies made before the clock starts. Beside the wall clock, each path's CPU
 * time per ring is printed: this process's main thread (the encoder in (a), the server in
 * (b) and (c)), the rest of the process (the client thread) and PostgreSQL (embedded server
 * only), which shows where the time went even on a busy machine. Uses DATABASE_URL if set,
 * else an embedded PostgreSQL in a temporary directory. The last line printed is one JSON
 * object.
 *
 *   npm run bench:ingest            BENCH_RINGS (default 200000), BENCH_CLIENTS (default 4)
 */
import { Worker } from 'node:worker_threads';
import { createRequire } from 'node:module';
import { cpuSample, cpuSince, describeCpu, postmasterPid, type CpuSpent } from './cpu.ts';
import { buildApp } from '../services/cli/app.ts';
import { loadConfig } from '../services/db/config.ts';
import { startThrowawayPostgres } from '../services/db/embedded.ts';
import { createKeysRepository } from '../services/db/keys.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool } from '../services/db/pool.ts';
import { RingCopyEncoder, copyRingsRaw, countRings, type RingRow } from '../services/db/rings.ts';
import { createUnitsRepository } from '../services/db/units.ts';
import type { UnitConfig } from '../services/core/types.ts';

const N = Number(process.env.BENCH_RINGS ?? 200_000);
const CLIENTS = Number(process.env.BENCH_CLIENTS ?? 4);
const BATCH = Number(process.env.BENCH_BATCH ?? 5_000);
const TC = 24;
const START_MS = Date.UTC(2026, 0, 2);
const log = (line: string) => process.stdout.write(line + '\n');

function reading(i: number, k: number): number {
  return Math.round((560 + 12 * Math.sin((k / TC) * 2 * Math.PI + i * 1e-3) + ((i * 31 + k * 17) % 7) * 0.37) * 100) / 100;
}

function ringJson(unitId: string | null, i: number): string {
  const ex: number[] = new Array(TC);
  for (let k = 0; k < TC; k++) ex[k] = reading(i, k);
  const head = unitId ? `{"unitId":"${unitId}",` : '{';
  return `${head}"ts":"${new Date(START_MS + i * 1000).toISOString()}","loadMw":${(20 + (i % 40) * 0.1).toFixed(1)},"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[${ex.join(',')}]}`;
}

function ringRow(unitId: string, i: number): RingRow {
  const ex = new Float64Array(TC);
  for (let k = 0; k < TC; k++) ex[k] = reading(i, k);
  return { unitId, tsMs: START_MS + i * 1000, loadMw: 20 + (i % 40) * 0.1, ambientC: 12.5, ambientKPa: 100.9, speedPct: 100, cdtC: null, cdpKPa: null, fuelFlowKgS: null, flameDetected: null, exhaustC: ex };
}

const unitConfig: UnitConfig = {
  ratedPowerMw: 24,
  thermocouples: { count: TC, firstAngleDeg: 7.5 },
  chambers: { count: 10, firstAngleDeg: 0 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
};

/**
 * The HTTP load, run in a worker thread so the server's event loop has its own core. The thread
 * loads undici and receives its bodies first, says it is ready, and starts on "go": the clock
 * and the CPU figures cover the requests only.
 */
const CLIENT_SOURCE = `
const { workerData, parentPort } = require('node:worker_threads');
const { createRequire } = require('node:module');
const { request } = createRequire(workerData.from)('undici');
const { url, key, jobs } = workerData;
async function run() {
  const started = performance.now();
  const results = await Promise.all(jobs.map(async (bodies) => {
    let accepted = 0;
    for (const b of bodies) {
      const res = await request(url + b.path, { method: 'POST', headers: { authorization: 'Bearer ' + key, 'content-type': b.type }, body: b.chunks.length === 1 ? b.chunks[0] : (async function* () { for (const c of b.chunks) yield c; })(), headersTimeout: 0, bodyTimeout: 0 });
      const text = await res.body.text();
      if (res.statusCode !== 200) throw new Error('HTTP ' + res.statusCode + ': ' + text.slice(0, 300));
      accepted += JSON.parse(text).accepted;
    }
    return accepted;
  }));
  return { ms: performance.now() - started, accepted: results.reduce((a, b) => a + b, 0) };
}
parentPort.once('message', () => run().then((m) => parentPort.postMessage(m), (err) => parentPort.postMessage({ error: String(err && err.stack || err) })));
parentPort.postMessage({ ready: true });
`;

interface Body { path: string; type: string; chunks: Uint8Array[] }

/** Runs the clients; onStart is called just before they start (to take the CPU figures). */
function runClients(url: string, key: string, jobs: Body[][], onStart: () => void): Promise<{ ms: number; accepted: number }> {
  return new Promise((resolve, reject) => {
    const w = new Worker(CLIENT_SOURCE, { eval: true, workerData: { url, key, jobs, from: createRequire(import.meta.url).resolve('undici') } });
    w.on('message', (m) => {
      if (m.ready) {
        onStart();
        w.postMessage('go');
      } else {
        if (m.error) reject(new Error(m.error));
        else resolve(m);
        void w.terminate();
      }
    });
    w.once('error', reject);
  });
}

async function main(): Promise<void> {
  const logger = createLogger(process.env.LOG_LEVEL ?? 'warn', { component: 'bench' });
  const server = process.env.DATABASE_URL ? undefined : await startThrowawayPostgres('cansight-bench', logger);
  const url = process.env.DATABASE_URL ?? server!.url;
  const pool = createPool(url, { max: CLIENTS * 2 + 4 });
  try {
    await migrate(pool, logger);
    const units = createUnitsRepository(pool);
    const tag = Date.now().toString(36);
    const ids = (p: string) => Array.from({ length: CLIENTS }, (_, c) => `bench-${tag}-${p}${c}`);
    const copyIds = ids('c');
    const jsonIds = ids('j');
    const ndIds = ids('n');
    for (const id of [...copyIds, ...jsonIds, ...ndIds]) await units.create({ id, name: id, site: 'Bench' }, unitConfig, 'bench');
    const pm = postmasterPid(server?.dataDir);
    const per = Math.ceil(N / CLIENTS);
    log(`ingest benchmark: ${N} rings of ${TC} thermocouples per path, ${CLIENTS} concurrent clients, batches of ${BATCH}`);

    // (a) raw COPY.
    const rows = copyIds.map((id) => Array.from({ length: per }, (_, i) => ringRow(id, i)));
    let cpu0 = cpuSample(pm);
    const t0 = performance.now();
    await Promise.all(rows.map(async (list) => {
      const enc = new RingCopyEncoder();
      for (let i = 0; i < list.length; i += BATCH) {
        enc.reset();
        for (let k = i; k < Math.min(list.length, i + BATCH); k++) enc.add(list[k]);
        await copyRingsRaw(pool, enc);
      }
    }));
    const copyS = (performance.now() - t0) / 1000;
    const copyRingsPerS = (per * CLIENTS) / copyS;
    const copyCpu = cpuSince(cpu0, pm);
    log(`(a) raw COPY        ${(per * CLIENTS).toLocaleString('en')} rings in ${copyS.toFixed(2)} s  ${Math.round(copyRingsPerS).toLocaleString('en')} rings/s`);
    log(`    ${describeCpu(copyCpu, per * CLIENTS, 'encoder', 'other')}`);
    rows.length = 0;

    const config = loadConfig({ ...process.env, LOG_LEVEL: 'silent', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000', CANSIGHT_POOL_MAX: String(CLIENTS * 2 + 4) });
    const app = await buildApp({ config, pool, logger: createLogger('silent'), parts: { api: false, ingest: true } });
    await app.listen({ host: '127.0.0.1', port: 0 });
    const addr = app.server.address();
    const base = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
    const key = (await createKeysRepository(pool).create('ingest', null, 'bench')).key;

    // (b) JSON batches.
    const jsonJobs: Body[][] = jsonIds.map((id) => {
      const bodies: Body[] = [];
      for (let i = 0; i < per; i += BATCH) {
        const parts: string[] = [];
        for (let k = i; k < Math.min(per, i + BATCH); k++) parts.push(ringJson(null, k));
        bodies.push({ path: `/v1/units/${id}/rings`, type: 'application/json', chunks: [Buffer.from(`{"rings":[${parts.join(',')}]}`)] });
      }
      return bodies;
    });
    const json = await runClients(base, key, jsonJobs, () => (cpu0 = cpuSample(pm)));
    const jsonCpu = cpuSince(cpu0, pm);
    const jsonRingsPerS = json.accepted / (json.ms / 1000);
    log(`(b) JSON batch      ${json.accepted.toLocaleString('en')} rings in ${(json.ms / 1000).toFixed(2)} s  ${Math.round(jsonRingsPerS).toLocaleString('en')} rings/s`);
    log(`    ${describeCpu(jsonCpu, json.accepted, 'server', 'client')}`);

    // (c) NDJSON streams: one request per client, the body sent in 64 KiB pieces.
    const ndJobs: Body[][] = ndIds.map((id) => {
      const chunks: Uint8Array[] = [];
      let buf: string[] = [];
      let size = 0;
      for (let i = 0; i < per; i++) {
        const line = ringJson(id, i) + '\n';
        buf.push(line);
        size += line.length;
        if (size >= 65_536) {
          chunks.push(Buffer.from(buf.join('')));
          buf = [];
          size = 0;
        }
      }
      if (buf.length) chunks.push(Buffer.from(buf.join('')));
      return [{ path: '/v1/rings', type: 'application/x-ndjson', chunks }];
    });
    const nd = await runClients(base, key, ndJobs, () => (cpu0 = cpuSample(pm)));
    const ndCpu = cpuSince(cpu0, pm);
    const ndjsonRingsPerS = nd.accepted / (nd.ms / 1000);
    log(`(c) NDJSON stream   ${nd.accepted.toLocaleString('en')} rings in ${(nd.ms / 1000).toFixed(2)} s  ${Math.round(ndjsonRingsPerS).toLocaleString('en')} rings/s`);
    log(`    ${describeCpu(ndCpu, nd.accepted, 'server', 'client')}`);
    await app.close();

    const stored = await countRings(pool);
    if (stored !== per * CLIENTS * 3) throw new Error(`expected ${per * CLIENTS * 3} rings stored, found ${stored}`);
    const jsonRatio = jsonRingsPerS / copyRingsPerS;
    const ndjsonRatio = ndjsonRingsPerS / copyRingsPerS;
    log(`ratio to raw COPY: JSON ${jsonRatio.toFixed(2)}, NDJSON ${ndjsonRatio.toFixed(2)} (goal ≥ 0.5)`);
    const r = (x: number) => Math.round(x);
    const r2 = (x: number) => Math.round(x * 100) / 100;
    const perRing = (s: number, n: number) => (Number.isFinite(s) ? r2((s * 1e6) / n) : null);
    const us = (c: CpuSpent, n: number) => ({ main: perRing(c.mainS, n), other: perRing(c.otherS, n), postgres: perRing(c.postgresS, n), pgConnections: perRing(c.connectionsS, n) });
    log(JSON.stringify({
      bench: 'ingest', copyRingsPerS: r(copyRingsPerS), jsonRingsPerS: r(jsonRingsPerS), ndjsonRingsPerS: r(ndjsonRingsPerS), jsonRatio: r2(jsonRatio), ndjsonRatio: r2(ndjsonRatio),
      cpuUsPerRing: { copy: us(copyCpu, per * CLIENTS), json: us(jsonCpu, json.accepted), ndjson: us(ndCpu, nd.accepted) },
    }));
  } finally {
    await pool.end();
    if (server) await server.stop();
  }
}

await main();
