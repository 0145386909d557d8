/**
 * The thermocouple model against IEC 60584-1 class 2 (the tolerance written below, not the
 * project's own function), and the plume geometry against the forward swirl model (plume of
 * chamber k at φₖ + s·ψ(L)) worked out in the test.
 */
import { describe, expect, it } from 'vitest';
import { thermocoupleAnglesDeg } from '../../services/core/geometry.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { buildScenario } from '../../services/sim/scenarios.ts';
import { demoFleet } from '../../services/sim/fleet.ts';
import type { SimUnit } from '../../services/sim/types.ts';
import { class2ByStandardC } from '../core/helpers.ts';
import { arcDeg, coldCentreDeg, plumeByHandDeg, std } from './helpers.ts';

/**
 * IEC 60584-1 class 2 tolerance of a Type K thermocouple (class2ByStandardC: ±2.5 °C or
 * ±0.0075·|t|, whichever is greater), which the standard gives from −40 to 1200 °C (from memory).
 */
function class2InRangeC(tC: number): number {
  expect(tC).toBeGreaterThanOrEqual(-40);
  expect(tC).toBeLessThanOrEqual(1200);
  return class2ByStandardC(tC);
}

describe('thermocouple readings', () => {
  it('every reading of a healthy unit lies within IEC 60584-1 class 2 (±2.5 °C or ±0.0075·|t|) of the gas temperature at the probe, in steady running and in starts', () => {
    const s = buildScenario('starts', { days: 3 });
    const unit = s.units[0];
    const sim = simulateUnit({ ...unit, faults: [] }, { from: s.from, to: s.to, seed: 11 });
    const b = sim.batch();
    const m = b.thermocoupleCount;
    let checked = 0, worstFrac = 0;
    const errs: number[] = [];
    for (let r = 0; r < b.count; r += 7) {
      const gas = sim.gasTemperaturesAt(b.tsMs[r])!;
      for (let i = 0; i < m; i++) {
        const e = b.exhaustC[r * m + i] - gas[i];
        worstFrac = Math.max(worstFrac, Math.abs(e) / class2InRangeC(gas[i]));
        errs.push(e);
        checked++;
      }
    }
    expect(checked).toBeGreaterThan(20_000);
    expect(worstFrac).toBeLessThanOrEqual(1);
    // Not trivially inside: the sensor error is real (offsets and noise), using a fair part of the band.
    expect(worstFrac).toBeGreaterThan(0.3);
    expect(std(errs)).toBeGreaterThan(0.5);
  });

  it('each probe has a fixed offset (its mean error is stable) and ring-to-ring noise of a few tenths of a degree', () => {
    const unit = buildScenario('healthy').units[0];
    const sim = simulateUnit(unit, { from: '2026-01-10T00:00:00Z', to: '2026-01-11T00:00:00Z', seed: 5 });
    const b = sim.batch();
    const m = b.thermocoupleCount;
    const first: number[][] = Array.from({ length: m }, () => []);
    for (let r = 0; r < b.count; r++) {
      const gas = sim.gasTemperaturesAt(b.tsMs[r])!;
      for (let i = 0; i < m; i++) first[i].push(b.exhaustC[r * m + i] - gas[i]);
    }
    const offsets = first.map((e) => e.reduce((a, c) => a + c, 0) / e.length);
    expect(std(offsets)).toBeGreaterThan(0.4);
    for (const e of first) {
      const sd = std(e);
      expect(sd).toBeGreaterThan(0.15);
      expect(sd).toBeLessThan(0.8);
    }
  });
});

/** Twin runs (same seed, with and without the fault): noise is identical, so their difference is the fault alone. */
function faultProfile(unit: SimUnit, at: string) {
  const healthy = simulateUnit({ ...unit, faults: [] }, { from: at, to: new Date(Date.parse(at) + 60_000).toISOString(), seed: 2 }).healthyReadingsAt(at)!;
  const sim = simulateUnit(unit, { from: at, to: new Date(Date.parse(at) + 60_000).toISOString(), seed: 2 });
  const faulty = sim.healthyReadingsAt(at)!;
  const op = sim.operatingPointAt(at);
  const dev = faulty.map((v, i) => v - healthy[i]);
  return { dev, op };
}

function correctedLoad(loadMw: number, rated: number, ambC: number, ambKPa: number): number {
  return loadMw / rated / ((ambKPa / 101.325) * Math.sqrt((ambC + 273.15) / 288.15));
}

describe('a plugging chamber’s plume lands where the forward swirl model says', () => {
  const cases: { name: string; unit: SimUnit; chamber: number }[] = [];
  const fleet = demoFleet('2026-03-01T00:00:00Z');
  const hp2 = fleet.find((u) => u.config.id === 'hp-2')!;
  cases.push({ name: 'eleven chambers, 20 thermocouples, sense +1 (hp-2, chamber 4)', unit: hp2, chamber: 4 });
  const kf1 = fleet.find((u) => u.config.id === 'kf-1')!;
  cases.push({ name: 'twelve chambers, 23 thermocouples, sense −1 (kf-1, chamber 6)', unit: { ...kf1, faults: [{ kind: 'nozzle_plugging', chamber: 6, at: '2026-01-01T00:00:00Z', days: 10, depthPct: 15 }] }, chamber: 6 });
  const mr2 = fleet.find((u) => u.config.id === 'mr-2')!;
  cases.push({ name: 'nine chambers, 17 thermocouples, sense +1 (mr-2, chamber 3)', unit: { ...mr2, faults: [{ kind: 'nozzle_plugging', chamber: 3, at: '2026-01-01T00:00:00Z', days: 10, depthPct: 15 }] }, chamber: 3 });

  for (const c of cases) {
    it(c.name, () => {
      const angles = thermocoupleAnglesDeg(c.unit.config);
      let checked = 0;
      // Hours across two days at different loads and ambients.
      for (let h = 0; h < 48; h += 5) {
        const at = new Date(Date.parse('2026-02-25T00:00:00Z') + h * 3_600_000).toISOString();
        const { dev, op } = faultProfile(c.unit, at);
        if (op.segment !== 'run') continue;
        const lc = correctedLoad(op.loadMw, c.unit.config.ratedPowerMw, op.ambientC, op.ambientKPa);
        const { chambers, swirl } = c.unit.config;
        const expected = plumeByHandDeg(chambers.firstAngleDeg, chambers.count, c.chamber - 1, swirl.sense, swirl.curve as [number, number][], lc);
        const found = coldCentreDeg(angles, dev);
        expect(arcDeg(found, expected), `at ${at}, load ${lc.toFixed(2)}`).toBeLessThan(4);
        // And it is a real cold plume: several degrees deep.
        expect(Math.min(...dev)).toBeLessThan(-8);
        checked++;
      }
      expect(checked).toBeGreaterThan(3);
    });
  }

  it('under a wrong configured swirl curve the plume follows the true curve, not the configured one', () => {
    const s = buildScenario('wrong-swirl');
    const unit = s.units[0];
    const angles = thermocoupleAnglesDeg(unit.config);
    const at = new Date(s.to - 12 * 3_600_000).toISOString();
    const { dev, op } = faultProfile(unit, at);
    const lc = correctedLoad(op.loadMw, unit.config.ratedPowerMw, op.ambientC, op.ambientKPa);
    const found = coldCentreDeg(angles, dev);
    // Chamber 2 of 11 (first at 0°, pitch 32.73°), sense +1: the true curve is the configured one plus 25°.
    expect(unit.config.chambers).toEqual({ count: 11, firstAngleDeg: 0 });
    expect(unit.config.swirl.curve).toEqual([[0.2, 88], [0.6, 70], [1, 52]]);
    expect(unit.physics!.trueSwirl!.curve).toEqual([[0.2, 113], [0.6, 95], [1, 77]]);
    const trueAngle = plumeByHandDeg(0, 11, 1, 1, [[0.2, 113], [0.6, 95], [1, 77]], lc);
    const configured = plumeByHandDeg(0, 11, 1, 1, [[0.2, 88], [0.6, 70], [1, 52]], lc);
    expect(arcDeg(found, trueAngle)).toBeLessThan(4);
    expect(arcDeg(found, configured)).toBeGreaterThan(18);
  });
});
