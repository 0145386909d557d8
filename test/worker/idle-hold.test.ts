/**
 * The analyser skips the findings at the hold level while the unit has no alert condition
 * pending or active (UnitAnalyser.alertsIdle, set from what applyAlertObservations reports).
 * The alert rules use those findings only to hold active alerts, so the alerts must come out
 * the same. Two cases, each analysed twice (always evaluating both levels, and skipping while
 * idle) through the real alert rules on a real database: a simulated unit that loses a flame
 * and relights it, and a cold plume that swings about its raise level (where only the hold
 * level keeps the alert active). Same changes at the same instants, with fewer
 * hold evaluations.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { defaultThresholds } from '../../services/core/findings.ts';
import { loadConfig } from '../../services/db/config.ts';
import { withTransaction } from '../../services/db/pool.ts';
import type { RingColumns } from '../../services/db/analysis-rings.ts';
import { createUnitsRepository, type ConfigVersionRecord } from '../../services/db/units.ts';
import { applyAlertObservations, deadbandThresholds, loadAlertSettings, type AlertChange, type AlertObservation } from '../../services/worker/alerts.ts';
import { UnitAnalyser } from '../../services/worker/unit-analyser.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { DEFAULT_SCORECARD_END, scorecardFleet } from '../../services/scorecard/scorecard.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';

let db: TestDatabase;
const config = loadConfig({ LOG_LEVEL: 'silent' });
const settings = loadAlertSettings(config);
// A unit of the scorecard fleet whose one fault is a lost flame (seed 1: sc-02, chamber 8).
const fleet = scorecardFleet({ seed: 1, units: 20, referenceDays: 9, days: 30, end: DEFAULT_SCORECARD_END });
const unit = fleet.units.find((u) => u.faults?.[0]?.kind === 'flame_loss')!;
const fault = unit.faults![0] as { at: string };

function columns(fromMs: number, toMs: number): RingColumns {
  const rings = [...simulateUnit(unit, { from: fromMs, to: toMs, seed: fleet.seed, steadyIntervalS: 60 }).rings()];
  return {
    count: rings.length,
    tsMs: Float64Array.from(rings, (r) => Date.parse(r.ts)),
    loadMw: Float64Array.from(rings, (r) => r.loadMw),
    ambientC: Float64Array.from(rings, (r) => r.ambientC),
    ambientKPa: Float64Array.from(rings, (r) => r.ambientKPa),
    speedPct: Float64Array.from(rings, (r) => r.speedPct),
    exhaustC: rings.map((r) => Float64Array.from(r.exhaustC, (v) => (v === null ? NaN : v))),
    fuelFlowKgS: Float64Array.from(rings, (r) => r.fuelFlowKgS ?? NaN),
    flameDetected: Int8Array.from(rings, (r) => (r.flameDetected === undefined || r.flameDetected === null ? -1 : r.flameDetected ? 1 : 0)),
  };
}

async function run(unitId: string, skipWhileIdle: boolean, rings: RingColumns): Promise<{ changes: AlertChange[]; holdEvaluations: number }> {
  const { id, name, site, ...cfg } = unit.config;
  await createUnitsRepository(db.pool).create({ id: unitId, name, site }, cfg, 'test');
  const versions: ConfigVersionRecord[] = [{ version: 1, effectiveFrom: null, createdAt: new Date(0).toISOString(), config: cfg }];
  const analyser = new UnitAnalyser({
    unitId,
    versions,
    baseline: null,
    driftChambers: [],
    driftThermocouples: [],
    raise: defaultThresholds,
    hold: deadbandThresholds(defaultThresholds, settings),
    settings: config.worker,
  });
  const changes: AlertChange[] = [];
  let holdEvaluations = 0;
  const BATCH = 120;
  for (let from = 0; from < rings.count; from += BATCH) {
    const observations: AlertObservation[] = [];
    for (let j = from; j < Math.min(rings.count, from + BATCH); j++) {
      if (!skipWhileIdle) analyser.alertsIdle = false;
      const idleBefore = analyser.alertsIdle;
      const r = analyser.analyse(rings, j);
      if (!r.raise || !r.hold) continue;
      if (!(idleBefore && r.raise.length === 0)) holdEvaluations++;
      observations.push({ ts: new Date(rings.tsMs[j]), raise: r.raise, hold: r.hold });
    }
    if (observations.length === 0) continue;
    const after = { idle: false };
    changes.push(...(await withTransaction(db.pool, (c) => applyAlertObservations(c, unitId, observations, settings, after))));
    analyser.alertsIdle = after.idle;
  }
  return { changes, holdEvaluations };
}

beforeAll(async () => {
  db = await createTestDatabase();
}, 60_000);

afterAll(async () => {
  await db?.drop();
});

/** Steady full-speed rings at 80 % load with two adjacent probes whose cold plume swings between 42.5 and 47.5 °C deep (raised from 45, held from 42). */
function hovering(count: number): RingColumns {
  const m = unit.config.thermocouples.count;
  const t0 = Date.parse('2026-06-01T00:00:00Z');
  const exhaustC = Array.from({ length: count }, (_, j) => {
    const r = new Float64Array(m).fill(560);
    const depth = 45 + 2.5 * Math.sin((2 * Math.PI * j) / 15);
    r[4] = 560 - depth;
    r[5] = 560 - depth + 1;
    return r;
  });
  return {
    count,
    tsMs: Float64Array.from({ length: count }, (_, j) => t0 + j * 60_000),
    loadMw: new Float64Array(count).fill(0.8 * unit.config.ratedPowerMw),
    ambientC: new Float64Array(count).fill(15),
    ambientKPa: new Float64Array(count).fill(101.325),
    speedPct: new Float64Array(count).fill(100),
    exhaustC,
    fuelFlowKgS: new Float64Array(count).fill(NaN),
    flameDetected: new Int8Array(count).fill(-1),
  };
}

describe('hold-level findings skipped while a unit is idle', () => {
  it('a cold plume hovering about its raise level: the same changes, the alert held by the hold level', async () => {
    const rings = hovering(240);
    const always = await run('hover-always', false, rings);
    const skipping = await run('hover-skip', true, rings);
    const shape = (xs: AlertChange[]) => xs.map((c) => [c.action, c.kind, c.chamber, c.thermocouple, c.grade, c.fromGrade, c.at.toISOString()]);
    // One alert, raised once and held through every swing below the raise level.
    expect(always.changes.filter((c) => c.action === 'raised')).toHaveLength(1);
    expect(always.changes.some((c) => c.action === 'returned_to_normal')).toBe(false);
    expect(shape(skipping.changes)).toEqual(shape(always.changes));
  }, 120_000);

  it('give the same alert changes as evaluating them on every ring, with fewer evaluations', async () => {
    const at = Date.parse(fault.at);
    const rings = columns(at - 6 * 3_600_000, at + 12 * 3_600_000);
    const always = await run('idle-always', false, rings);
    const skipping = await run('idle-skip', true, rings);
    const shape = (xs: AlertChange[]) => xs.map((c) => [c.action, c.kind, c.chamber, c.thermocouple, c.grade, c.fromGrade, c.at.toISOString()]);
    expect(always.changes.length).toBeGreaterThan(0);
    expect(always.changes.some((c) => c.kind === 'chamber_cold' && c.action === 'raised')).toBe(true);
    expect(shape(skipping.changes)).toEqual(shape(always.changes));
    expect(skipping.holdEvaluations).toBeLessThan(always.holdEvaluations / 2);
  }, 120_000);
});
