/**
 * Detection scorecard: a seeded fleet of simulated units with randomised geometry, swirl and
 * dispatch, a third healthy and the rest with one chamber or thermocouple fault each, run
 * through the whole service (HTTP ingest, the worker with its real settings, the alert rules)
 * on its own embedded PostgreSQL (or DATABASE_URL), then scored against the simulator's ground
 * truth (services/sim/scorecard.ts). The history is a clean reference window first, then
 * the scored month in which the faults begin and develop. The worker runs with its real
 * settings except one: its automatic first baseline is fitted after 7 days of steady data
 * instead of 14 (CANSIGHT_BASELINE_AUTO_DAYS), so the reference window is 9 days (7, plus two
 * for a peaking unit whose first start comes after a weekend) rather than over two weeks, which
 * keeps the run to minutes. Set CANSIGHT_BASELINE_AUTO_DAYS=14 SCORECARD_REFERENCE_DAYS=16 for
 * the full setting. Prints the table; the last line is one JSON object.
 *
 *   npm run scorecard     SCORECARD_UNITS (20), SCORECARD_DAYS (30), SCORECARD_REFERENCE_DAYS (9),
 *                         SCORECARD_SEED (1), SCORECARD_END (2026-11-01T00:00:00Z),
 *                         SCORECARD_ONLY (unit ids, comma-separated: run just those units of the
 *                         seeded fleet, with the faults they have in the whole fleet),
 *                         SCORECARD_ALERTS_OUT (file: every alert read back, as JSON)
 */
import { writeFileSync } from 'node:fs';
import { loadConfig } from '../services/db/config.ts';
import { startThrowawayPostgres } from '../services/db/embedded.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool } from '../services/db/pool.ts';
import { DEFAULT_SCORECARD_END, formatScorecard, floorsMet, headline, SCORECARD_FLOORS, scorecardFleet } from '../services/sim/scorecard.ts';
import { runScorecard } from '../services/sim/scorecard-run.ts';

const UNITS = Number(process.env.SCORECARD_UNITS ?? 20);
const DAYS = Number(process.env.SCORECARD_DAYS ?? 30);
const REFERENCE_DAYS = Number(process.env.SCORECARD_REFERENCE_DAYS ?? 9);
const SEED = Number(process.env.SCORECARD_SEED ?? 1);
const END = process.env.SCORECARD_END ?? DEFAULT_SCORECARD_END;
const say = (line: string) => process.stderr.write(line + '\n');

async function database(): Promise<{ url: string; stop: () => Promise<void> }> {
  if (process.env.DATABASE_URL) {
    const admin = createPool(process.env.DATABASE_URL, { max: 1 });
    await admin.query('DROP DATABASE IF EXISTS cansight_scorecard WITH (FORCE)');
    await admin.query('CREATE DATABASE cansight_scorecard');
    await admin.end();
    const u = new URL(process.env.DATABASE_URL);
    u.pathname = '/cansight_scorecard';
    return { url: u.toString(), stop: async () => undefined };
  }
  const server = await startThrowawayPostgres('cansight-scorecard', createLogger('warn'));
  return { url: server.url, stop: () => server.stop() };
}

async function main(): Promise<void> {
  const db = await database();
  const pool = createPool(db.url, { max: 12, statementTimeoutMs: 600_000 });
  try {
    await migrate(pool);
    const config = loadConfig({ CANSIGHT_BASELINE_AUTO_DAYS: '7', ...process.env, LOG_LEVEL: process.env.SCORECARD_LOG_LEVEL ?? 'warn', HOST: '127.0.0.1', PORT: '0', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000' });
    const whole = scorecardFleet({ seed: SEED, units: UNITS, referenceDays: REFERENCE_DAYS, days: DAYS, end: END });
    const only = process.env.SCORECARD_ONLY ? new Set(process.env.SCORECARD_ONLY.split(',').map((x) => x.trim())) : null;
    const fleet = only ? { ...whole, units: whole.units.filter((u) => only.has(u.config.id)), healthy: whole.healthy.filter((id) => only.has(id)) } : whole;
    if (fleet.units.length === 0) throw new Error(`SCORECARD_ONLY names no unit of the fleet (${whole.units.map((u) => u.config.id).join(', ')})`);
    say(`scorecard: ${UNITS} units, ${REFERENCE_DAYS} + ${DAYS} days, seed ${SEED}, baseline after ${config.worker.baselineAutoDays} days of steady data`);
    const run = await runScorecard({ pool, config, logger: createLogger(config.logLevel), fleet, steadyIntervalS: 60, say });
    process.stdout.write(formatScorecard(run.figures) + '\n');
    if (process.env.SCORECARD_ALERTS_OUT) writeFileSync(process.env.SCORECARD_ALERTS_OUT, JSON.stringify(run.alerts, null, 1));
    process.stdout.write(`\n${run.rings} rings through ingest and the worker in ${Math.round(run.seconds)} s\n`);
    const met = floorsMet(run.figures);
    process.stdout.write(`floors (${JSON.stringify(SCORECARD_FLOORS)}): ${Object.entries(met).map(([k, v]) => `${k} ${v ? 'met' : 'NOT met'}`).join(', ')}\n`);
    process.stdout.write(JSON.stringify({ bench: 'scorecard', seed: SEED, ...headline(run.figures), floorsMet: met, rings: run.rings, seconds: Math.round(run.seconds) }) + '\n');
  } finally {
    await pool.end();
    await db.stop();
  }
}

await main();
