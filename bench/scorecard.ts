/**
 * Detection scorecard: a seeded fleet of simulated units with randomised geometry, swirl and
 * dispatch, a third healthy and the rest with one chamber or thermocouple fault each, run
 * through the whole service (HTTP ingest, the worker with its real settings, the alert rules)
 * on its own embedded PostgreSQL (or DATABASE_URL), then scored against the simulator's ground
 * truth (services/scorecard/scorecard.ts). The history is a clean reference window first, then
 * the scored month in which the faults begin and develop. The worker runs with its real
 * settings except one: its automatic first baseline is fitted after 7 days of steady data
 * instead of 14 (CANSIGHT_BASELINE_AUTO_DAYS), so the reference window is 9 days (7, plus two
 * for a peaking unit whose first start comes after a weekend) rather than over two weeks, which
 * keeps the run to minutes. Set CANSIGHT_BASELINE_AUTO_DAYS=14 SCORECARD_REFERENCE_DAYS=16 for
 * the full setting.
 *
 * Two fleets are run, one after the other, each on a database of its own: the ideal fleet
 * (the machines are their model) and the realistic fleet (REALISTIC_MISMATCH: true swirl off the
 * configured curve by 3–10° and in slope, plume width ±30 % of the solver's kernel, wandering
 * fingerprints, a probe replaced on a known date, rings every minute, every five minutes and,
 * on one unit for its last days, every second, and a 15 °C seasonal swing across the window).
 * The realistic fleet is drawn from a seed of its own (SCORECARD_REALISTIC_SEED, 101), which no
 * detection threshold was chosen on, and held to REALISTIC_FLOORS. Prints each fleet's table,
 * then both headline columns side by side; the last line is one JSON object, the ideal fleet's
 * figures with the realistic fleet's under "realistic".
 *
 *   npm run scorecard     SCORECARD_UNITS (20), SCORECARD_DAYS (30), SCORECARD_REFERENCE_DAYS (9),
 *                         SCORECARD_SEED (1), SCORECARD_END (2026-11-01T00:00:00Z),
 *                         SCORECARD_ONLY (unit ids, comma-separated: run just those units of the
 *                         seeded fleet, with the faults they have in the whole fleet),
 *                         SCORECARD_ALERTS_OUT (file: every alert read back, as JSON; the
 *                         realistic fleet's go to the same name with .realistic before .json),
 *                         SCORECARD_REALISTIC_SEED (101), SCORECARD_ONE_HZ_DAYS (2),
 *                         SCORECARD_FLEETS (ideal,realistic: run just one of them),
 *                         SCORECARD_FEED (live: day by day, all units together, the nightly
 *                         drift run after each day; import: each unit's whole history sent in
 *                         one go, unit after unit, with no drift run called, so baselines,
 *                         drift and alerts follow ring time alone)
 */
import { writeFileSync } from 'node:fs';
import { loadConfig } from '../services/db/config.ts';
import { startThrowawayPostgres } from '../services/db/embedded.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool } from '../services/db/pool.ts';
import {
  DEFAULT_SCORECARD_END, formatScorecard, formatSideBySide, floorsMet, headline, IDEAL_MISMATCH, REALISTIC_FLOORS, REALISTIC_MISMATCH,
  SCORECARD_FLOORS, scorecardFleet, type FleetMismatch, type ScorecardFloors,
} from '../services/scorecard/scorecard.ts';
import { runScorecard, type ScorecardFeed, type ScorecardRun } from '../services/scorecard/run.ts';

const UNITS = Number(process.env.SCORECARD_UNITS ?? 20);
const DAYS = Number(process.env.SCORECARD_DAYS ?? 30);
const REFERENCE_DAYS = Number(process.env.SCORECARD_REFERENCE_DAYS ?? 9);
const SEED = Number(process.env.SCORECARD_SEED ?? 1);
const REALISTIC_SEED = Number(process.env.SCORECARD_REALISTIC_SEED ?? 101);
const ONE_HZ_DAYS = Number(process.env.SCORECARD_ONE_HZ_DAYS ?? REALISTIC_MISMATCH.oneHzDays);
const END = process.env.SCORECARD_END ?? DEFAULT_SCORECARD_END;
const FLEETS = (process.env.SCORECARD_FLEETS ?? 'ideal,realistic').split(',').map((x) => x.trim());
const FEED = (process.env.SCORECARD_FEED ?? 'live') as ScorecardFeed;
if (FEED !== 'live' && FEED !== 'import') throw new Error(`SCORECARD_FEED="${FEED}" is neither live nor import`);
const say = (line: string) => process.stderr.write(line + '\n');

interface FleetPlan {
  name: 'ideal' | 'realistic';
  seed: number;
  mismatch: FleetMismatch;
  floors: ScorecardFloors;
}

const PLANS: FleetPlan[] = [
  { name: 'ideal', seed: SEED, mismatch: IDEAL_MISMATCH, floors: SCORECARD_FLOORS },
  { name: 'realistic', seed: REALISTIC_SEED, mismatch: { ...REALISTIC_MISMATCH, oneHzDays: ONE_HZ_DAYS }, floors: REALISTIC_FLOORS },
];

/** One PostgreSQL (DATABASE_URL's server, or a throwaway embedded one) with a fresh database per fleet. */
async function databases(names: string[]): Promise<{ urls: Map<string, string>; stop: () => Promise<void> }> {
  let serverUrl: string;
  let stop = async () => undefined as void;
  if (process.env.DATABASE_URL) serverUrl = process.env.DATABASE_URL;
  else {
    const server = await startThrowawayPostgres('cansight-scorecard', createLogger('warn'));
    serverUrl = server.url;
    stop = () => server.stop();
  }
  const admin = createPool(serverUrl, { max: 1 });
  const urls = new Map<string, string>();
  try {
    for (const name of names) {
      const db = `cansight_scorecard_${name}`;
      await admin.query(`DROP DATABASE IF EXISTS ${db} WITH (FORCE)`);
      await admin.query(`CREATE DATABASE ${db}`);
      const u = new URL(serverUrl);
      u.pathname = `/${db}`;
      urls.set(name, u.toString());
    }
  } finally {
    await admin.end();
  }
  return { urls, stop };
}

async function runFleet(plan: FleetPlan, url: string): Promise<ScorecardRun> {
  const pool = createPool(url, { max: 12, statementTimeoutMs: 600_000 });
  try {
    await migrate(pool);
    const config = loadConfig({ CANSIGHT_BASELINE_AUTO_DAYS: '7', ...process.env, LOG_LEVEL: process.env.SCORECARD_LOG_LEVEL ?? 'warn', HOST: '127.0.0.1', PORT: '0', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000' });
    const whole = scorecardFleet({ seed: plan.seed, units: UNITS, referenceDays: REFERENCE_DAYS, days: DAYS, end: END, mismatch: plan.mismatch });
    const only = process.env.SCORECARD_ONLY ? new Set(process.env.SCORECARD_ONLY.split(',').map((x) => x.trim())) : null;
    const fleet = only ? { ...whole, units: whole.units.filter((u) => only.has(u.config.id)), healthy: whole.healthy.filter((id) => only.has(id)) } : whole;
    if (fleet.units.length === 0) throw new Error(`SCORECARD_ONLY names no unit of the fleet (${whole.units.map((u) => u.config.id).join(', ')})`);
    say(`scorecard, ${plan.name} fleet: ${UNITS} units, ${REFERENCE_DAYS} + ${DAYS} days, seed ${plan.seed}, fed ${FEED === 'live' ? 'live, day by day' : 'as one import per unit'}, baseline after ${config.worker.baselineAutoDays} days of steady data`);
    const run = await runScorecard({ pool, config, logger: createLogger(config.logLevel), fleet, steadyIntervalS: 60, feed: FEED, say: (l) => say(`${plan.name}: ${l}`) });
    if (process.env.SCORECARD_ALERTS_OUT) {
      const out = plan.name === 'ideal' ? process.env.SCORECARD_ALERTS_OUT : process.env.SCORECARD_ALERTS_OUT.replace(/(\.json)?$/, `.${plan.name}.json`);
      writeFileSync(out, JSON.stringify(run.alerts, null, 1));
    }
    return run;
  } finally {
    await pool.end();
  }
}

async function main(): Promise<void> {
  const plans = PLANS.filter((p) => FLEETS.includes(p.name));
  if (plans.length === 0) throw new Error(`SCORECARD_FLEETS="${process.env.SCORECARD_FLEETS}" names no fleet (ideal, realistic)`);
  const db = await databases(plans.map((p) => p.name));
  const results: { plan: FleetPlan; run: ScorecardRun }[] = [];
  try {
    for (const plan of plans) results.push({ plan, run: await runFleet(plan, db.urls.get(plan.name) as string) });
  } finally {
    await db.stop();
  }
  const summary: Record<string, unknown>[] = [];
  for (const { plan, run } of results) {
    process.stdout.write(`\n== ${plan.name} fleet (seed ${plan.seed}) ==\n`);
    process.stdout.write(formatScorecard(run.figures) + '\n');
    process.stdout.write(`\n${run.rings} rings through ingest and the worker in ${Math.round(run.seconds)} s\n`);
    const met = floorsMet(run.figures, plan.floors);
    process.stdout.write(`floors (${JSON.stringify(plan.floors)}): ${Object.entries(met).map(([k, v]) => `${k} ${v ? 'met' : 'NOT met'}`).join(', ')}\n`);
    summary.push({ seed: plan.seed, ...headline(run.figures), floorsMet: met, rings: run.rings, seconds: Math.round(run.seconds) });
  }
  process.stdout.write('\n' + formatSideBySide(results.map((r) => ({ name: r.plan.name, figures: r.run.figures }))) + '\n');
  const line: Record<string, unknown> = { bench: 'scorecard', feed: FEED };
  results.forEach((r, i) => {
    if (r.plan.name === 'ideal') Object.assign(line, summary[i]);
    else line[r.plan.name] = summary[i];
  });
  process.stdout.write(JSON.stringify(line) + '\n');
}

await main();
