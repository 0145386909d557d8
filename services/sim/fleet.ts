/**
 * The demo fleet: invented units at invented sites, with different chamber and thermocouple
 * counts, swirl curves and senses, dispatch profiles, and a few faults developing, so the
 * dashboard and alerts have something real to show. Fault times are placed relative to an
 * anchor time (the end of the backfilled history), so "the last 90 days" always holds them.
 * Names and numbers are made up; swirl magnitudes are order of magnitude from memory.
 */
import type { SiteClimate } from './ambient.ts';
import { toMs } from './generator.ts';
import { DAY_MS, HOUR_MS } from './operation.ts';
import type { SimUnit, SimUnitConfig, TimeInput } from './types.ts';

export const DEMO_SITES: Record<string, SiteClimate> = {
  'Harbour Point': { name: 'Harbour Point', utcOffsetH: 0, meanC: 11, seasonalAmpC: 6.5, dailyAmpC: 3.5, warmestDayOfYear: 205, weatherSigmaC: 2.5, elevationM: 12 },
  'Kestrel Fen': { name: 'Kestrel Fen', utcOffsetH: 1, meanC: 9.5, seasonalAmpC: 10, dailyAmpC: 5, warmestDayOfYear: 200, weatherSigmaC: 3, elevationM: 4 },
  'Marrow Ridge': { name: 'Marrow Ridge', utcOffsetH: 2, meanC: 19, seasonalAmpC: 9, dailyAmpC: 8, warmestDayOfYear: 198, weatherSigmaC: 2, elevationM: 610 },
};

/** The default anchor of demo data written by the CLI (reproducible unless --end is given). */
export const DEFAULT_DEMO_END = '2026-03-01T00:00:00Z';

function unitConfig(c: SimUnitConfig): SimUnitConfig {
  return c;
}

/** The Harbour Point units' type (11 chambers, 20 thermocouples), also the single-unit scenarios'. */
export const HARBOUR_POINT_TYPE = {
  ratedPowerMw: 58.5,
  thermocouples: { count: 20, firstAngleDeg: 9 },
  chambers: { count: 11, firstAngleDeg: 0 },
  temperatureUnit: 'C' as const,
  view: 'upstream' as const,
};

/** The demo fleet's unit configurations (as Cansight is told them), without any simulation detail. */
export function demoFleetConfigs(): SimUnitConfig[] {
  return demoFleet().map((u) => u.config);
}

/**
 * The demo fleet with its faults placed before `end` (default DEFAULT_DEMO_END):
 * - hp-1 (11 chambers, 20 thermocouples, 58.5 MW, base load): healthy.
 * - hp-2 (same type, cycling): chamber 4 fuel nozzle plugging over four weeks, from 35 days before end.
 * - kf-1 (12 chambers, 23 thermocouples, 118 MW, sense −1, °F, cycling): thermocouple 11 drifting
 *   low from 20 days before end.
 * - kf-2 (12 chambers, 21 thermocouples, sense −1, °F, peaking with daily starts): chamber 11 fails
 *   to crossfire at a start about 9 days before end (the start trips; the retry succeeds).
 * - mr-1 (9 chambers, 17 thermocouples, 33.5 MW, peaking, high site): healthy, daily starts.
 * - mr-2 (same type, base load): thermocouple 5 replaced 6 days before end, the new probe reading
 *   3 °C higher (recorded as a maintenance event when the demo fleet is registered).
 * Families: hp-1 and hp-2 (harbour-point-11), mr-1 and mr-2 (marrow-ridge-9); kf-1 and kf-2 are
 * both kestrel-fen-12, though their thermocouple counts differ, so a comparison leaves one out.
 * The geometry is invented, not any manufacturer's: chamber counts and ratings of no well-known
 * machine, and thermocouple counts that are not a whole multiple of the chamber count (1.7 to
 * 1.9 per chamber, so a chamber's plume, σ = 0.55–0.65 of a chamber pitch after mixing, spans
 * about two thermocouples wherever the swirl puts it).
 */
export function demoFleet(end: TimeInput = DEFAULT_DEMO_END): SimUnit[] {
  const e = toMs(end, 'end');
  const before = (days: number, hours = 0) => new Date(e - days * DAY_MS + hours * HOUR_MS).toISOString();
  const hp = DEMO_SITES['Harbour Point'], kf = DEMO_SITES['Kestrel Fen'], mr = DEMO_SITES['Marrow Ridge'];
  const hpType = HARBOUR_POINT_TYPE;
  const kfType = { ratedPowerMw: 118, chambers: { count: 12, firstAngleDeg: 15 }, view: 'downstream' as const };
  const mrType = { ratedPowerMw: 33.5, thermocouples: { count: 17, firstAngleDeg: 10.6 }, chambers: { count: 9, firstAngleDeg: 20 }, view: 'upstream' as const };
  return [
    {
      config: unitConfig({ id: 'hp-1', name: 'Harbour Point unit 1', site: hp.name, family: 'harbour-point-11', ...hpType, swirl: { sense: 1, curve: [[0.2, 88], [0.6, 70], [1.0, 52]], startupDeg: 100 } }),
      climate: hp,
      physics: { exhaustOffsetC: -4 },
      dispatch: { profile: 'base', tripsPerYear: 3 },
    },
    {
      config: unitConfig({ id: 'hp-2', name: 'Harbour Point unit 2', site: hp.name, family: 'harbour-point-11', ...hpType, swirl: { sense: 1, curve: [[0.2, 90], [0.6, 71], [1.0, 54]], startupDeg: 100 } }),
      climate: hp,
      physics: { exhaustOffsetC: 2 },
      dispatch: { profile: 'cycling', nightLoad: 0.62 },
      faults: [{ kind: 'nozzle_plugging', chamber: 4, at: before(35), days: 28, depthPct: 14 }],
    },
    {
      config: unitConfig({ id: 'kf-1', name: 'Kestrel Fen unit 1', site: kf.name, family: 'kestrel-fen-12', ...kfType, temperatureUnit: 'F', thermocouples: { count: 23, firstAngleDeg: 7.8 }, swirl: { sense: -1, curve: [[0.2, 64], [0.5, 52], [1.0, 33]], startupDeg: 75 } }),
      climate: kf,
      physics: { exhaustOffsetC: 6, mixingWidthFrac: 0.65 },
      dispatch: { profile: 'cycling', nightLoad: 0.58 },
      faults: [{ kind: 'tc_drift', thermocouple: 11, at: before(20, 9), ratePerDayC: -1.2 }],
    },
    {
      config: unitConfig({ id: 'kf-2', name: 'Kestrel Fen unit 2', site: kf.name, family: 'kestrel-fen-12', ...kfType, temperatureUnit: 'F', thermocouples: { count: 21, firstAngleDeg: 8.6 }, swirl: { sense: -1, curve: [[0.2, 62], [0.5, 50], [1.0, 35]], startupDeg: 74 } }),
      climate: kf,
      physics: { exhaustOffsetC: 3, mixingWidthFrac: 0.65, igniterChambers: [2, 8], flameDetectorChambers: [5, 11] },
      dispatch: { profile: 'peaking', weekendRunChance: 0.3 },
      faults: [{ kind: 'crossfire_failure', chamber: 11, at: before(9) }],
    },
    {
      config: unitConfig({ id: 'mr-1', name: 'Marrow Ridge unit 1', site: mr.name, family: 'marrow-ridge-9', ...mrType, temperatureUnit: 'C', swirl: { sense: 1, curve: [[0.3, 105], [0.7, 86], [1.0, 71]], startupDeg: 118 } }),
      climate: mr,
      physics: { exhaustOffsetC: -2, mixingWidthFrac: 0.55 },
      dispatch: { profile: 'peaking', weekendRunChance: 0.5 },
    },
    {
      config: unitConfig({ id: 'mr-2', name: 'Marrow Ridge unit 2', site: mr.name, family: 'marrow-ridge-9', ...mrType, temperatureUnit: 'C', swirl: { sense: 1, curve: [[0.3, 102], [0.7, 84], [1.0, 70]], startupDeg: 115 } }),
      climate: mr,
      physics: { exhaustOffsetC: 0, mixingWidthFrac: 0.55 },
      dispatch: { profile: 'base', tripsPerYear: 5 },
      faults: [{ kind: 'tc_replaced', thermocouple: 5, at: before(6, 10), offsetC: 3 }],
    },
  ];
}
