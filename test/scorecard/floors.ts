/**
 * The detection scorecard's floors, on a smaller run than `npm run scorecard` but the same
 * code: 20 simulated units (a third healthy, the rest one chamber or thermocouple fault each,
 * geometry, swirl and dispatch drawn from the seed) sent through HTTP ingest, analysed by the
 * worker, alerted by the alert rules, read back through GET /v1/alerts and scored against the
 * simulator's ground truth. The worker fits its automatic baseline after 2 days of steady data
 * here (3 days of clean reference), so the faults have 8 days to begin and develop.
 * Asserted here, as the floors of `npm run scorecard` (SCORECARD_FLOORS): every fault is scored;
 * chamber faults found with the right chamber first (top-1) in at least 95 % of cases;
 * thermocouple faults found as thermocouple faults, with no chamber blamed, in at least 95 %; no
 * alert of grade alarm or critical on a healthy unit; per operator, the average alarm rate inside
 * the EEMUA 191 benchmark (about one per 10 minutes) and no flood (more than 10 in 10 minutes).
 * The hook's time limit is generous because the run shares the machine with the rest of the suite.
 * Run twice, in files of their own so that they run side by side: fed live, day by day
 * (floors.test.ts), and as one import per unit with no drift run called (floors-import.test.ts),
 * where the same floors must hold on ring time alone.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { loadConfig } from '../../services/db/config.ts';
import { createLogger } from '../../services/db/logger.ts';
import { DEFAULT_SCORECARD_END, formatScorecard, headline, SCORECARD_FLOORS, scorecardFleet } from '../../services/scorecard/scorecard.ts';
import { runScorecard, type ScorecardFeed, type ScorecardRun } from '../../services/scorecard/run.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';

const fleet = scorecardFleet({ seed: 7, units: 20, referenceDays: 3, days: 8, end: DEFAULT_SCORECARD_END });
const config = loadConfig({ LOG_LEVEL: process.env.TEST_LOG_LEVEL ?? 'silent', HOST: '127.0.0.1', PORT: '0', CANSIGHT_RATE_LIMIT_PER_MIN: '10000000', CANSIGHT_BASELINE_AUTO_DAYS: '2' });

export function floorsSuite(feed: ScorecardFeed): void {
  let db: TestDatabase;
  let run: ScorecardRun;
  beforeAll(async () => {
    db = await createTestDatabase();
    run = await runScorecard({ pool: db.pool, config, logger: createLogger(config.logLevel), fleet, feed, say: process.env.SCORECARD_VERBOSE ? (l) => process.stderr.write(l + '\n') : undefined });
    if (process.env.SCORECARD_VERBOSE) process.stderr.write(formatScorecard(run.figures) + '\n' + JSON.stringify(headline(run.figures)) + '\n');
  }, 1_500_000);

  afterAll(async () => {
    await db?.drop();
  });

  describe(`detection scorecard floors, fed ${feed === 'live' ? 'live' : 'as one import per unit'}`, () => {
    it('scores every fault of the fleet', () => {
      const faulty = fleet.units.length - fleet.healthy.length;
      expect(run.figures.chamber.length + run.figures.thermocouple.length).toBe(faulty);
      expect(run.figures.chamber.length).toBeGreaterThanOrEqual(4);
      expect(run.figures.thermocouple.length).toBeGreaterThanOrEqual(4);
      expect(run.rings).toBeGreaterThan(fleet.units.length * 11 * 1000);
    });

    it('raises no alert of grade alarm or critical on a healthy unit', () => {
      const severe = run.figures.falseAlerts.filter((a) => a.grade === 'alarm' || a.grade === 'critical');
      expect(severe).toEqual([]);
    });

    it('names the right chamber first for at least 95 % of chamber faults', () => {
      const h = headline(run.figures);
      expect(h.chamberTop1Pct, formatScorecard(run.figures)).toBeGreaterThanOrEqual(SCORECARD_FLOORS.chamberTop1Pct);
    });

    it('finds at least 95 % of thermocouple faults as thermocouple faults, blaming no chamber', () => {
      const h = headline(run.figures);
      expect(h.tcAsTcPct, formatScorecard(run.figures)).toBeGreaterThanOrEqual(SCORECARD_FLOORS.tcAsTcPct);
    });

    it('keeps each operator inside the EEMUA 191 benchmark: about one alarm per 10 minutes on average, never a flood', () => {
      for (const r of run.figures.alarmRates) {
        expect(r.per10Min, r.operator).toBeLessThanOrEqual(SCORECARD_FLOORS.per10Min);
        expect(r.peak10Min, r.operator).toBeLessThanOrEqual(SCORECARD_FLOORS.peak10Min);
      }
    });
  });
}
