/**
 * The ways a simulated unit can differ from its model: a probe replaced on a known date, and
 * chamber fingerprints that wander. Each is checked against a twin run (same seed, so the same
 * noise) and against numbers written here: the IEC 60584-1 class 2 tolerance, and the fact that
 * shares of one fuel flow that move between chambers leave the ring mean where it was.
 */
import { describe, expect, it } from 'vitest';
import { simulateUnit } from '../../services/sim/generator.ts';
import { buildScenario } from '../../services/sim/scenarios.ts';
import type { SimUnit } from '../../services/sim/types.ts';
import { class2ByStandardC } from '../core/helpers.ts';
import { mean } from './helpers.ts';

const s = buildScenario('healthy', { days: 8 });
const base: SimUnit = s.units[0];
const H = 3_600_000;
const replacedAt = new Date(s.from + 3 * 24 * H).toISOString();

describe('a probe replaced on a known date', () => {
  const unit: SimUnit = { ...base, physics: { ...base.physics, probeReplacements: [{ thermocouple: 5, at: replacedAt, stepFrac: 0.8 }] } };
  const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 4 });
  const twin = simulateUnit(base, { from: s.from, to: s.to, seed: 4 });

  it('reads as before until that date, then steps by 0.8 of its class-2 tolerance and stays inside class 2', () => {
    let before = 0, after = 0;
    for (let h = 1; h < 8 * 24; h += 7) {
      const t = s.from + h * H;
      const a = sim.healthyReadingsAt(t)!, b = twin.healthyReadingsAt(t)!;
      const gas = sim.gasTemperaturesAt(t)!;
      for (let i = 0; i < a.length; i++) {
        if (i !== 4 || t < Date.parse(replacedAt)) {
          expect(a[i], `thermocouple ${i + 1} at ${new Date(t).toISOString()}`).toBe(b[i]);
          if (i === 4) before++;
          continue;
        }
        // At 550 °C the tolerance is 0.0075 × 550 = 4.1 °C, so the step is about 3.3 °C either way.
        expect(Math.abs(a[i] - b[i])).toBeCloseTo(0.8 * class2ByStandardC(gas[i]), 6);
        // The new probe is a class-2 probe too (its noise included, bounded well inside the band).
        expect(Math.abs(a[i] - gas[i])).toBeLessThanOrEqual(class2ByStandardC(gas[i]));
        after++;
      }
    }
    expect(before).toBeGreaterThan(5);
    expect(after).toBeGreaterThan(10);
  });

  it('is written in the ground truth with its thermocouple and date, and leaves the unit without a fault', () => {
    const r = sim.truth.faults.filter((f) => f.kind === 'probe_replaced');
    expect(r).toHaveLength(1);
    expect(r[0]).toMatchObject({ thermocouple: 5, at: replacedAt.replace('.000Z', 'Z') });
    expect(sim.truth.faults.filter((f) => f.kind !== 'probe_replaced')).toEqual([]);
  });

  it('refuses a step beyond the class-2 tolerance, a thermocouple the unit lacks, a probe replaced twice', () => {
    const make = (p: NonNullable<SimUnit['physics']>['probeReplacements']) => () => simulateUnit({ ...base, physics: { probeReplacements: p } }, { from: s.from, to: s.to });
    expect(make([{ thermocouple: 5, at: replacedAt, stepFrac: 1.5 }])).toThrow(/stepFrac 1.5 is outside ±1/);
    expect(make([{ thermocouple: 99, at: replacedAt, stepFrac: 0.5 }])).toThrow(/thermocouple 99 does not exist/);
    expect(make([{ thermocouple: 5, at: replacedAt, stepFrac: 0.5 }, { thermocouple: 5, at: s.to - H, stepFrac: 0.5 }])).toThrow(/replaced twice/);
  });
});

describe('chamber fingerprints that wander', () => {
  const unit: SimUnit = { ...base, physics: { ...base.physics, fingerprintWanderPct: 1, fingerprintWanderDays: 4 } };
  const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 4 });
  const twin = simulateUnit(base, { from: s.from, to: s.to, seed: 4 });
  const diff = (t: number) => {
    const a = sim.gasTemperaturesAt(t)!, b = twin.gasTemperaturesAt(t)!;
    return Array.from(a, (v, i) => v - b[i]);
  };

  it('move the gas under the plumes by about a degree over days, slowly, and never the ring mean', () => {
    let largest = 0, largestMinuteStep = 0;
    for (let h = 2; h < 8 * 24; h += 5) {
      const t = s.from + h * H;
      if (sim.operatingPointAt(t).segment !== 'run') continue;
      const d = diff(t), next = diff(t + 60_000);
      // One fuel flow shared out differently: what one chamber gains the others lose.
      expect(Math.abs(mean(d))).toBeLessThan(0.02);
      largest = Math.max(largest, ...d.map(Math.abs));
      largestMinuteStep = Math.max(largestMinuteStep, ...d.map((v, i) => Math.abs(next[i] - v)));
    }
    // A 1 % share at a rise of several hundred degrees, half of it kept in the plume: a degree or more.
    expect(largest).toBeGreaterThan(0.7);
    expect(largest).toBeLessThan(10);
    // Slow: from one minute to the next it changes by a small part of that.
    expect(largestMinuteStep).toBeLessThan(0.05 * largest);
  });

  it('with no wander the rings are those of the fixed fingerprint', () => {
    const still = simulateUnit({ ...base, physics: { ...base.physics, fingerprintWanderPct: 0 } }, { from: s.from, to: s.to, seed: 4 });
    const t = s.from + 30 * H;
    expect(Array.from(still.healthyReadingsAt(t)!)).toEqual(Array.from(twin.healthyReadingsAt(t)!));
  });
});
