/**
 * The scorecard's pure part: the fleet drawn from a seed (geometry, swirl, dispatch and faults
 * in the ranges the scorecard promises), the plugging ground truth, and the scoring rules
 * applied to hand-made alerts (right chamber, runner-up, a thermocouple taken for a chamber,
 * false alerts by highest grade, the alarm rate per operator).
 */
import { describe, expect, it } from 'vitest';
import { ambientC } from '../../services/sim/ambient.ts';
import {
  CHAMBER_FAULT_KINDS,
  headline,
  IDEAL_MISMATCH,
  peakInSpan,
  REALISTIC_MISMATCH,
  ringIntervalS,
  pluggingDepthReachedMs,
  scoreAlerts,
  scorecardFleet,
  fleetTruth,
  TC_FAULT_KINDS,
  type ScoredAlert,
} from '../../services/scorecard/scorecard.ts';

const END = '2026-11-01T00:00:00Z';
const fleet = scorecardFleet({ seed: 3, units: 21, referenceDays: 9, days: 30, end: END });

describe('scorecard fleet', () => {
  it('is the same for the same seed and differs for another', () => {
    const again = scorecardFleet({ seed: 3, units: 21, referenceDays: 9, days: 30, end: END });
    expect(JSON.stringify(again)).toBe(JSON.stringify(fleet));
    const other = scorecardFleet({ seed: 4, units: 21, referenceDays: 9, days: 30, end: END });
    expect(JSON.stringify(other.units)).not.toBe(JSON.stringify(fleet.units));
  });

  it('draws 8–16 chambers, 1.2–2.9 thermocouples per chamber and never a whole multiple, both swirl senses and all three dispatch profiles', () => {
    for (const u of fleet.units) {
      const n = u.config.chambers.count;
      expect(n).toBeGreaterThanOrEqual(8);
      expect(n).toBeLessThanOrEqual(16);
      const m = u.config.thermocouples.count;
      expect(m % n, `${u.config.id}: ${m} thermocouples, ${n} chambers`).not.toBe(0);
      expect(m / n).toBeGreaterThanOrEqual(1.1);
      expect(m / n).toBeLessThanOrEqual(3);
      const curve = u.config.swirl.curve;
      expect(curve[0][1]).toBeGreaterThan(curve[curve.length - 1][1]);
    }
    expect(new Set(fleet.units.map((u) => u.config.swirl.sense))).toEqual(new Set([1, -1]));
    expect(new Set(fleet.units.map((u) => u.dispatch.profile))).toEqual(new Set(['base', 'cycling', 'peaking']));
    expect(new Set(fleet.units.map((u) => u.config.thermocouples.count / u.config.chambers.count)).size).toBeGreaterThan(1);
  });

  it('leaves a third healthy and gives every other unit one fault, every kind at least once, none in the reference window', () => {
    expect(fleet.healthy.length).toBe(7);
    const faulty = fleet.units.filter((u) => !fleet.healthy.includes(u.config.id));
    expect(faulty.length).toBe(14);
    const kinds = new Set<string>();
    for (const u of faulty) {
      expect(u.faults).toHaveLength(1);
      const f = u.faults![0];
      kinds.add(f.kind);
      expect(Date.parse(String(f.at))).toBeGreaterThanOrEqual(fleet.faultFromMs);
      expect(Date.parse(String(f.at))).toBeLessThan(fleet.toMs);
    }
    for (const k of [...CHAMBER_FAULT_KINDS, ...TC_FAULT_KINDS]) expect(kinds.has(k)).toBe(true);
    for (const u of fleet.units) if (fleet.healthy.includes(u.config.id)) expect(u.faults ?? []).toEqual([]);
  });

  it('finds when a plugging plume reaches 10 °C: after the fault begins, before it reaches full depth', () => {
    const u = fleet.units.find((x) => x.faults?.[0]?.kind === 'nozzle_plugging')!;
    const truth = fleetTruth({ ...fleet, units: [u] })[0];
    const f = truth.faults[0];
    const t10 = pluggingDepthReachedMs(u, f, fleet.seed, fleet.toMs);
    expect(t10).not.toBeNull();
    expect(t10!).toBeGreaterThan(Date.parse(f.at));
    expect(t10!).toBeLessThan(Date.parse(String(f.params.fullDepthAt)));
    // A deeper level is reached later.
    const t20 = pluggingDepthReachedMs(u, f, fleet.seed, fleet.toMs, 20);
    if (t20 !== null) expect(t20).toBeGreaterThan(t10!);
  });
});

describe('the realistic fleet: the same units, differing from their model', () => {
  const real = scorecardFleet({ seed: 3, units: 21, referenceDays: 9, days: 30, end: END, mismatch: REALISTIC_MISMATCH });

  it('has the ideal fleet’s geometry, dispatch and faults, and the ideal fleet has no mismatch', () => {
    expect(real.units.map((u) => [u.config, u.dispatch, u.faults])).toEqual(fleet.units.map((u) => [u.config, u.dispatch, u.faults]));
    expect(real.healthy).toEqual(fleet.healthy);
    expect(fleet.mismatch).toEqual(IDEAL_MISMATCH);
    expect(fleet.ringRates).toEqual({});
    for (const u of fleet.units) expect(u.physics?.trueSwirl).toBeUndefined();
  });

  it('true swirl off the configured curve by 3–10° at 0.6 load and in slope; plume width 0.7–1.3 of the solver’s 0.5 pitch', () => {
    for (const u of real.units) {
      const conf = u.config.swirl.curve, tru = u.physics!.trueSwirl!.curve;
      expect(tru.map(([l]) => l)).toEqual(conf.map(([l]) => l));
      const d = tru.map(([, v], i) => v - conf[i][1]);
      // Knots at 0.2, 0.6 and 1.0 load: the 0.6 knot carries the offset alone (to the 0.1° rounding).
      expect(Math.abs(d[1])).toBeGreaterThanOrEqual(2.95);
      expect(Math.abs(d[1])).toBeLessThanOrEqual(10.05);
      // Slope ±5–15° per unit load over the 0.8 between the end knots: 4–12° more at one end than the other.
      expect(Math.abs(d[0] - d[2])).toBeGreaterThanOrEqual(3.9);
      expect(Math.abs(d[0] - d[2])).toBeLessThanOrEqual(12.1);
      const w = u.physics!.mixingWidthFrac!;
      expect(w).toBeGreaterThanOrEqual(0.35);
      expect(w).toBeLessThanOrEqual(0.65);
    }
    const offsets = real.units.map((u) => u.physics!.trueSwirl!.curve[1][1] - u.config.swirl.curve[1][1]);
    expect(offsets.some((x) => x > 0) && offsets.some((x) => x < 0)).toBe(true);
  });

  it('one probe replaced per unit inside the scored window, by up to its class-2 tolerance; fingerprints wander', () => {
    for (const u of real.units) {
      const [r] = u.physics!.probeReplacements!;
      expect(Date.parse(String(r.at))).toBeGreaterThan(real.faultFromMs);
      expect(Date.parse(String(r.at))).toBeLessThan(real.toMs);
      expect(Math.abs(r.stepFrac)).toBeGreaterThanOrEqual(0.3);
      expect(Math.abs(r.stepFrac)).toBeLessThanOrEqual(1);
      expect(u.physics!.fingerprintWanderPct).toBe(1);
    }
  });

  it('a ring a minute and one every five minutes in turn, and the first unit a ring a second for its last two days', () => {
    expect(ringIntervalS(real, 'sc-01', real.fromMs, 60)).toBe(60);
    expect(ringIntervalS(real, 'sc-02', real.fromMs, 60)).toBe(300);
    expect(ringIntervalS(real, 'sc-01', real.toMs - 2 * 86_400_000, 60)).toBe(1);
    expect(ringIntervalS(real, 'sc-01', real.toMs - 3 * 86_400_000, 60)).toBe(60);
    expect(ringIntervalS(fleet, 'sc-01', real.toMs - 86_400_000, 60)).toBe(60);
  });

  it('cools through the window on a 15 °C seasonal swing: about 9.9 °C over its 39 days, by the cosine worked out here', () => {
    const u = real.units[0], ideal = fleet.units[0];
    const from = real.fromMs, to = real.toMs;
    // Same site, same weather and daily cycle: the two climates differ by the seasonal term only.
    const extra = (t: number) => ambientC(u.climate, t) - ambientC(ideal.climate, t);
    const seasonal = (c: typeof u.climate, t: number) => c.seasonalAmpC * Math.cos((2 * Math.PI * ((t / 86_400_000) % 365.2425 - c.warmestDayOfYear)) / 365.2425);
    expect(extra(from)).toBeCloseTo(seasonal(u.climate, from) - seasonal(ideal.climate, from), 6);
    // On the steepest flank of a 15 °C cosine, 39 days fall by 2·15·sin(π·39/365.24) = 9.88 °C (±0.5 day of rounding).
    expect(seasonal(u.climate, from) - seasonal(u.climate, to)).toBeGreaterThan(9.8);
    expect(seasonal(u.climate, from) - seasonal(u.climate, to)).toBeLessThan(9.9);
  });
});

describe('scoring alerts against ground truth', () => {
  const truths = fleetTruth(fleet);
  const unitOf = (kind: string) => fleet.units.find((u) => u.faults?.[0]?.kind === kind)!;
  const after = (kind: string, hours: number) => new Date(Date.parse(String(unitOf(kind).faults![0].at)) + hours * 3_600_000).toISOString();
  const alert = (a: Partial<ScoredAlert> & Pick<ScoredAlert, 'unitId' | 'kind' | 'raisedAt'>): ScoredAlert => ({
    grade: 'warning', chamber: null, thermocouple: null, runnerUpChamber: null, history: [{ action: 'raised', grade: a.grade ?? 'warning', at: a.raisedAt }], ...a,
  });

  it('counts top-1 only when the first chamber alert names the chamber, top-2 when the runner-up does', () => {
    const flame = unitOf('flame_loss');
    const hot = unitOf('hot_chamber');
    const fc = (flame.faults![0] as { chamber: number }).chamber;
    const hc = (hot.faults![0] as { chamber: number }).chamber;
    const n = hot.config.chambers.count;
    const wrong = (hc % n) + 1;
    const alerts = [
      alert({ unitId: flame.config.id, kind: 'chamber_cold', chamber: fc, raisedAt: after('flame_loss', 0.1) }),
      alert({ unitId: hot.config.id, kind: 'chamber_hot', chamber: wrong, runnerUpChamber: hc, raisedAt: after('hot_chamber', 1) }),
      // A later alert naming the right chamber does not undo a wrong first one.
      alert({ unitId: hot.config.id, kind: 'chamber_hot', chamber: hc, raisedAt: after('hot_chamber', 5) }),
    ];
    const f = scoreAlerts(fleet, truths, alerts);
    const byUnit = new Map(f.chamber.map((c) => [c.unitId, c]));
    expect(byUnit.get(flame.config.id)!.top1).toBe(true);
    expect(byUnit.get(hot.config.id)!.top1).toBe(false);
    expect(byUnit.get(hot.config.id)!.top2).toBe(true);
    const unfound = f.chamber.filter((c) => c.unitId !== flame.config.id && c.unitId !== hot.config.id);
    for (const c of unfound) expect(c.top2).toBe(false);
    const h = headline(f);
    expect(h.chamberTop1Pct).toBeCloseTo((100 * 1) / f.chamber.length, 1);
  });

  it('counts a thermocouple fault only when named as one and no chamber is blamed after it began', () => {
    const open = unitOf('tc_open');
    const frozen = unitOf('tc_frozen');
    const to = (open.faults![0] as { thermocouple: number }).thermocouple;
    const tf = (frozen.faults![0] as { thermocouple: number }).thermocouple;
    const alerts = [
      alert({ unitId: open.config.id, kind: 'thermocouple_fault', thermocouple: to, raisedAt: after('tc_open', 0.5) }),
      alert({ unitId: frozen.config.id, kind: 'thermocouple_fault', thermocouple: tf, raisedAt: after('tc_frozen', 1) }),
      alert({ unitId: frozen.config.id, kind: 'chamber_cold', chamber: 2, raisedAt: after('tc_frozen', 30) }),
    ];
    const f = scoreAlerts(fleet, truths, alerts);
    const byUnit = new Map(f.thermocouple.map((t) => [t.unitId, t]));
    expect(byUnit.get(open.config.id)!.correct).toBe(true);
    expect(byUnit.get(frozen.config.id)!.namedThermocouple).toBe(true);
    expect(byUnit.get(frozen.config.id)!.correct).toBe(false);
    expect(headline(f).tcBlamedOnChamber).toBe(1);
  });

  it('grades a false alert on a healthy unit by the highest grade it reached, and counts every raise for the operator', () => {
    const id = fleet.healthy[0];
    const at = new Date(fleet.faultFromMs + 3_600_000).toISOString();
    const later = new Date(fleet.faultFromMs + 2 * 3_600_000).toISOString();
    const a = alert({
      unitId: id, kind: 'spread_jump', grade: 'warning', raisedAt: at,
      history: [
        { action: 'raised', grade: 'warning', at },
        { action: 'escalated', grade: 'alarm', at: later },
        { action: 'deescalated', grade: 'warning', at: later },
        { action: 'reactivated', grade: 'warning', at: later },
      ],
    });
    const f = scoreAlerts(fleet, truths, [a]);
    const h = headline(f);
    expect(h.falseAlerts).toEqual({ notice: 0, warning: 0, alarm: 1, critical: 0 });
    expect(h.falseAlarmGrade).toBe(1);
    const fleetRate = f.alarmRates.find((r) => r.operator === 'fleet')!;
    expect(fleetRate.annunciations).toBe(2);
    expect(fleetRate.peak10Min).toBe(1);
  });

  it('finds the most events in any ten minutes', () => {
    const m = 60_000;
    expect(peakInSpan([0, 1 * m, 2 * m, 11 * m, 12 * m], 10 * m)).toBe(3);
    expect(peakInSpan([0, 10 * m, 20 * m], 10 * m)).toBe(1);
    expect(peakInSpan([], 10 * m)).toBe(0);
  });
});
