/**
 * A unit with made-up analysis for the read-route tests: two hours of analysed rings ending a
 * minute ago (thermocouple 7 out of range, chamber 4 cold), hourly and daily rollups over 400
 * days with chamber 4's residual sinking, a baseline, drift state, and two open alerts.
 */
import { arcDistanceDeg, chamberAnglesDeg, plumeAngleDeg, swirlDeg, thermocoupleAnglesDeg, type UnitConfig } from '../../services/core/index.ts';
import { insertAlerts, insertAnalyses, insertBaseline, insertDriftStates, insertRollups, type SyntheticAnalysis, type SyntheticRollup } from '../../services/db/synthetic.ts';
import type { Pool } from '../../services/db/pool.ts';

export const MIN_MS = 60_000;
export const HOUR_MS = 3_600_000;
export const DAY_MS = 86_400_000;

export const CONFIG: UnitConfig = {
  ratedPowerMw: 24,
  thermocouples: { count: 18, firstAngleDeg: 10 },
  chambers: { count: 10, firstAngleDeg: 0 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
};

/** Exhaust readings with one chamber's plume cold by depthC (Gaussian of width widthDeg on the ring). */
export function ringWithColdChamber(config: UnitConfig, chamber: number, load: number, depthC: number, widthDeg = 16, level = 560): number[] {
  const at = plumeAngleDeg(config, chamber - 1, load);
  return Array.from(thermocoupleAnglesDeg(config), (a) => level - depthC * Math.exp(-0.5 * (arcDistanceDeg(a, at) / widthDeg) ** 2));
}

export interface Seeded {
  endMs: number;
  alertIds: string[];
}

export async function seedUnit(pool: Pool, unitId: string, nowMs: number): Promise<Seeded> {
  const endMs = Math.floor(nowMs / MIN_MS) * MIN_MS - MIN_MS;
  const rows: SyntheticAnalysis[] = [];
  for (let i = 119; i >= 0; i--) {
    const load = 0.9;
    const exhaust: (number | null)[] = ringWithColdChamber(CONFIG, 4, load, 30);
    exhaust[6] = 1500; // thermocouple 7 reads far out of range
    const centre = 555;
    const validity = exhaust.map((_, k) => (k === 6 ? 2 : 0));
    rows.push({
      tsMs: endMs - i * MIN_MS,
      loadFraction: load,
      spreadC: 28 + (i % 5),
      spreadLimitC: 40,
      validity,
      tcDeviationC: exhaust.map((v, k) => (k === 6 ? null : (v as number) - centre)),
      tcResidualC: exhaust.map((v, k) => (k === 6 ? null : ((v as number) - centre) * 0.5)),
      chamberDeviationC: Array.from({ length: 10 }, (_, k) => (k === 3 ? -24 : 2.5)),
      chamberResidualC: Array.from({ length: 10 }, (_, k) => (k === 3 ? -11 : 0.4)),
      swirlDeg: swirlDeg(CONFIG.swirl.curve, load),
      worstChamber: 4,
      worstLikelihood: 0.82,
      baselineVersion: 1,
      exhaustC: exhaust,
    });
  }
  await insertAnalyses(pool, unitId, rows);
  const roll: SyntheticRollup[] = [];
  const dayEnd = Math.floor(endMs / DAY_MS) * DAY_MS;
  for (let d = 399; d >= 0; d--) {
    const t = dayEnd - d * DAY_MS;
    const sink = d < 60 ? -(60 - d) * 0.2 : 0;
    roll.push({ period: 'day', metric: 'spread', bucketMs: t, means: [25 + (d % 7)], n: 1440, sd: 3 });
    roll.push({ period: 'day', metric: 'load_fraction', bucketMs: t, means: [0.85], n: 1440, sd: 0.05 });
    roll.push({ period: 'day', metric: 'chamber_residual', bucketMs: t, means: Array.from({ length: 10 }, (_, k) => (k === 3 ? sink : 0.3)), n: 1000, sd: 1.2 });
    roll.push({ period: 'day', metric: 'tc_invalid', bucketMs: t, means: Array.from({ length: 18 }, (_, k) => (k === 6 && d < 10 ? 1 : 0)), n: 1440, sd: 0 });
  }
  const hourEnd = Math.floor(endMs / HOUR_MS) * HOUR_MS;
  for (let h = 24 * 40 - 1; h >= 0; h--) {
    const t = hourEnd - h * HOUR_MS;
    roll.push({ period: 'hour', metric: 'spread', bucketMs: t, means: [27], n: 60, sd: 2 });
    roll.push({ period: 'hour', metric: 'load_fraction', bucketMs: t, means: [0.9], n: 60, sd: 0.01 });
    roll.push({ period: 'hour', metric: 'chamber_residual', bucketMs: t, means: Array.from({ length: 10 }, (_, k) => (k === 3 ? -8 - h / 200 : 0.2)), n: 60, sd: 1 });
  }
  await insertRollups(pool, unitId, roll);
  await insertBaseline(pool, unitId, 1, endMs - 400 * DAY_MS, endMs - 380 * DAY_MS);
  const lastDay = new Date(dayEnd - DAY_MS).toISOString().slice(0, 10);
  await insertDriftStates(pool, unitId, 1, [
    ...Array.from({ length: 10 }, (_, k) => ({
      subject: 'chamber' as const,
      index: k + 1,
      per30DaysC: k === 3 ? -6 : 0.05,
      intervalC: (k === 3 ? [-7, -5] : [-0.3, 0.4]) as [number, number],
      sigmaC: 1.2,
      lastValueC: k === 3 ? -12 : 0.3,
      lastDay,
      days: 60,
      cusum: k === 3 ? { upper: 0, lower: 9 } : { upper: 0.4, lower: 0.2 },
    })),
    { subject: 'thermocouple', index: 7, per30DaysC: -1, intervalC: [-2, 0.5], sigmaC: 2, lastValueC: -3, lastDay, days: 30 },
  ]);
  const alertIds = await insertAlerts(pool, unitId, [
    { kind: 'chamber_cold', grade: 'alarm', chamber: 4, raisedAtMs: endMs - 30 * MIN_MS, message: 'Chamber 4 is 24 °C colder than the average chamber.', advice: 'Borescope / inspect chamber 4 fuel nozzle at the next outage.' },
    { kind: 'thermocouple_fault', grade: 'warning', thermocouple: 7, raisedAtMs: endMs - 100 * MIN_MS, message: 'Thermocouple 7 reads out of range.', advice: 'Check thermocouple 7 wiring at the next opportunity.' },
    { kind: 'chamber_drift', grade: 'notice', chamber: 4, active: false, raisedAtMs: endMs - 20 * DAY_MS, message: 'Chamber 4 drifting colder.' },
  ]);
  return { endMs, alertIds };
}

export { chamberAnglesDeg };
