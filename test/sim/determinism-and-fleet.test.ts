/**
 * Same seed, same rings; any window agrees with a longer run that contains it; the iterator and
 * the batch agree; the demo fleet's configurations have the shape Cansight expects.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { simulateUnit } from '../../services/sim/generator.ts';
import { demoFleet, demoFleetConfigs } from '../../services/sim/fleet.ts';
import { buildScenario, scenarioNames } from '../../services/sim/scenarios.ts';
import type { RingBatch } from '../../services/sim/types.ts';

const fleet = demoFleet();
const DAY = 86_400_000;
const T0 = Date.parse('2026-02-10T00:00:00Z');

function same(a: RingBatch, b: RingBatch): boolean {
  if (a.count !== b.count) return false;
  for (const k of ['tsMs', 'loadMw', 'ambientC', 'ambientKPa', 'speedPct', 'fuelFlowKgS', 'flameDetected', 'exhaustC'] as const) {
    const x = a[k], y = b[k];
    for (let i = 0; i < x.length; i++) if (!(x[i] === y[i] || (Number.isNaN(x[i]) && Number.isNaN(y[i])))) return false;
  }
  return true;
}

describe('determinism', () => {
  it('the same seed gives the same rings; another seed gives other readings', () => {
    for (const u of fleet) {
      const a = simulateUnit(u, { from: T0, to: T0 + 2 * DAY, seed: 7 }).batch();
      const b = simulateUnit(u, { from: T0, to: T0 + 2 * DAY, seed: 7 }).batch();
      const c = simulateUnit(u, { from: T0, to: T0 + 2 * DAY, seed: 8 }).batch();
      expect(same(a, b), u.config.id).toBe(true);
      expect(same(a, c), u.config.id).toBe(false);
    }
  });

  it('any window equals the same stretch of a longer run (property, over units, seeds and windows)', () => {
    fc.assert(
      fc.property(fc.integer({ min: 0, max: fleet.length - 1 }), fc.integer({ min: 0, max: 2 ** 31 }), fc.integer({ min: 0, max: 20 * 24 }), fc.integer({ min: 1, max: 72 }), (ui, seed, startH, lenH) => {
        const u = fleet[ui];
        const from = T0 - 10 * DAY + startH * 3_600_000;
        const to = from + lenH * 3_600_000;
        const part = simulateUnit(u, { from, to, seed }).batch();
        const whole = simulateUnit(u, { from: from - 2 * DAY, to: to + DAY, seed }).batch();
        const i0 = whole.tsMs.indexOf(part.tsMs[0]);
        if (part.count === 0) return true;
        expect(i0).toBeGreaterThanOrEqual(0);
        const m = part.thermocoupleCount;
        let mismatches = 0;
        for (let r = 0; r < part.count; r++) {
          if (whole.tsMs[i0 + r] !== part.tsMs[r] || whole.loadMw[i0 + r] !== part.loadMw[r]) mismatches++;
          for (let i = 0; i < m; i++) if (!Object.is(whole.exhaustC[(i0 + r) * m + i], part.exhaustC[r * m + i])) mismatches++;
        }
        expect(mismatches).toBe(0);
        return true;
      }),
      { numRuns: 25, seed: 42 },
    );
  });

  it('the ring iterator and the batch give the same rings, in the API ring shape', () => {
    const s = buildScenario('tc-faults', { days: 8 });
    const sim = simulateUnit(s.units[0], { from: s.from, to: s.to, seed: 3 });
    const b = sim.batch();
    let r = 0, mismatches = 0, nulls = 0;
    for (const ring of sim.rings()) {
      if (Date.parse(ring.ts) !== b.tsMs[r] || ring.loadMw !== b.loadMw[r] || ring.ambientC !== b.ambientC[r] || ring.ambientKPa !== b.ambientKPa[r]
        || ring.speedPct !== b.speedPct[r] || ring.fuelFlowKgS !== b.fuelFlowKgS[r] || ring.flameDetected !== (b.flameDetected[r] === 1)
        || ring.exhaustC.length !== b.thermocoupleCount) mismatches++;
      for (let i = 0; i < ring.exhaustC.length; i++) {
        const v = ring.exhaustC[i], w = b.exhaustC[r * b.thermocoupleCount + i];
        if (v === null) { nulls++; if (!Number.isNaN(w)) mismatches++; } else if (v !== w) mismatches++;
      }
      r++;
    }
    expect(mismatches).toBe(0);
    expect(nulls).toBe(0);
    expect(r).toBe(b.count);
    const first = sim.rings().next().value!;
    expect(Object.keys(first).sort()).toEqual(['ambientC', 'ambientKPa', 'exhaustC', 'flameDetected', 'fuelFlowKgS', 'loadMw', 'speedPct', 'ts', 'unitId']);
    expect(first.ts).toMatch(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?Z$/);
  });

  it('steady rings come once a minute by default and at the configured interval', () => {
    const u = fleet.find((x) => x.config.id === 'hp-1')!;
    const a = simulateUnit(u, { from: T0, to: T0 + 6 * 3_600_000 }).batch();
    expect(a.count).toBe(360);
    const b = simulateUnit(u, { from: T0, to: T0 + 6 * 3_600_000, steadyIntervalS: 10 }).batch();
    expect(b.count).toBe(2160);
  });

  it('a bad window or a fault on a chamber that does not exist is refused with a clear message', () => {
    const u = fleet[0];
    expect(() => simulateUnit(u, { from: T0, to: T0 - 1 })).toThrow(/must be after/);
    expect(() => simulateUnit(u, { from: 'yesterday', to: T0 })).toThrow(/not a time/);
    expect(() => simulateUnit({ ...u, faults: [{ kind: 'flame_loss', chamber: 12, at: T0 }] }, { from: T0, to: T0 + DAY })).toThrow(/chamber 12 does not exist.*1–11/);
    expect(() => simulateUnit({ ...u, faults: [{ kind: 'tc_open', thermocouple: 0, at: T0 }] }, { from: T0, to: T0 + DAY })).toThrow(/thermocouple 0/);
  });
});

describe('demo fleet', () => {
  const configs = demoFleetConfigs();

  it('has several units at a few sites, with different chamber and thermocouple counts and both swirl senses', () => {
    expect(configs.length).toBeGreaterThanOrEqual(5);
    expect(new Set(configs.map((c) => c.site)).size).toBeGreaterThanOrEqual(3);
    expect(new Set(configs.map((c) => c.chambers.count)).size).toBeGreaterThanOrEqual(3);
    expect(new Set(configs.map((c) => c.thermocouples.count)).size).toBeGreaterThanOrEqual(3);
    expect(new Set(configs.map((c) => c.swirl.sense))).toEqual(new Set([1, -1]));
  });

  it('each configuration has the unit shape of the API (id pattern, rating, geometry, swirl curve of tens of degrees varying with load)', () => {
    for (const c of configs) {
      expect(c.id).toMatch(/^[a-z0-9-]{1,40}$/);
      expect(c.name.length).toBeGreaterThan(0);
      expect(c.ratedPowerMw).toBeGreaterThan(0);
      expect(c.thermocouples.count).toBeGreaterThanOrEqual(12);
      expect(c.chambers.count).toBeGreaterThanOrEqual(6);
      expect(['C', 'F']).toContain(c.temperatureUnit);
      const degs = c.swirl.curve.map((p) => p[1]);
      expect(Math.min(...degs)).toBeGreaterThanOrEqual(10);
      expect(Math.max(...degs) - Math.min(...degs)).toBeGreaterThanOrEqual(10);
      const loads = c.swirl.curve.map((p) => p[0]);
      expect([...loads].sort((a, b) => a - b)).toEqual(loads);
    }
    expect(new Set(configs.map((c) => c.id)).size).toBe(configs.length);
  });

  it('healthy units run base-load exhaust spreads of about 15–45 °C (common practice, no written source)', () => {
    for (const id of ['hp-1', 'mr-2']) {
      const u = fleet.find((x) => x.config.id === id)!;
      const b = simulateUnit(u, { from: T0, to: T0 + 3 * DAY, seed: 1 }).batch();
      const m = b.thermocoupleCount;
      const spreads: number[] = [];
      for (let r = 0; r < b.count; r++) {
        if (b.speedPct[r] < 99 || b.loadMw[r] < 0.9 * u.config.ratedPowerMw) continue;
        let mx = -Infinity, mn = Infinity;
        for (let i = 0; i < m; i++) { mx = Math.max(mx, b.exhaustC[r * m + i]); mn = Math.min(mn, b.exhaustC[r * m + i]); }
        spreads.push(mx - mn);
      }
      spreads.sort((a, b2) => a - b2);
      const median = spreads[Math.floor(spreads.length / 2)];
      expect(median, id).toBeGreaterThan(15);
      expect(median, id).toBeLessThan(45);
    }
  });

  it('every scenario builds, and the fleet scenario is the demo fleet', () => {
    for (const name of scenarioNames()) expect(buildScenario(name).units.length).toBeGreaterThan(0);
    expect(buildScenario('fleet').units.map((u) => u.config.id)).toEqual(configs.map((c) => c.id));
    expect(() => buildScenario('no-such')).toThrow(/unknown scenario "no-such"; choose one of: fleet/);
  });
});
