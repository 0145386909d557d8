/**
 * The API server of the read benchmark, run on a thread of its own so the load generator in the
 * main thread does not share its event loop (as a separate process would not).
 */
import { parentPort, workerData } from 'node:worker_threads';
import { buildApp } from '../services/api/app.ts';
import { loadConfig } from '../services/db/config.ts';
import { createLogger } from '../services/db/logger.ts';
import { createPool } from '../services/db/pool.ts';

const { databaseUrl } = workerData as { databaseUrl: string };
const config = loadConfig({ ...process.env, LOG_LEVEL: 'silent', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000' });
const pool = createPool(databaseUrl, { max: config.poolMax, statementTimeoutMs: config.statementTimeoutMs });
const app = await buildApp({ config, pool, logger: createLogger('silent'), parts: { api: true, ingest: false } });
const base = await app.listen({ host: '127.0.0.1', port: 0 });
parentPort!.on('message', async (m: string) => {
  if (m !== 'close') return;
  await app.close();
  await pool.end();
  parentPort!.close();
});
parentPort!.postMessage({ base });
