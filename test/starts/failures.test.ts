/**
 * Failed starts. The simulator has no fault for a flame lost in warm-up or an ignition that
 * never takes, so these starts are made from a simulated normal start: the rings up to the
 * moment of failure are the simulator's, and from there the flame is out (or never came), the
 * fuel is off, the shaft coasts down and the exhaust cools (helpers.ts failedStartBatch).
 */
import { describe, expect, it } from 'vitest';
import { detectStarts, type StartRecord } from '../../services/core/index.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { buildScenario } from '../../services/sim/scenarios.ts';
import { failedStartBatch, startRings } from './helpers.ts';

const s = buildScenario('starts', { days: 2 });
const unit = s.units[0];
const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 5 });
const b = sim.batch();
const start = sim.truth.starts[0];
const ms = (iso: string) => Date.parse(iso);

function only(batch: ReturnType<typeof failedStartBatch>): { start: StartRecord; counters: ReturnType<typeof detectStarts>['counters'] } {
  const res = detectStarts(unit.config, startRings(batch));
  expect(res.starts.length).toBe(1);
  return { start: res.starts[0], counters: res.counters };
}

describe('failed starts', () => {
  it('flame lost in warm-up: a failed start, stopped in warm-up, with a start_failed finding and no chamber blamed', () => {
    const lossAt = ms(start.warmupAt) + 45_000;
    const { start: d, counters } = only(failedStartBatch(b, lossAt));
    expect(d.outcome).toBe('flame_lost_in_warmup');
    expect(d.stoppedIn).toBe('warm_up');
    expect(d.phases.map((p) => p.phase)).toEqual(['cranking', 'firing', 'flame_established', 'warm_up']);
    expect(Math.abs(d.endMs - lossAt)).toBeLessThanOrEqual(1000);
    const f = d.findings.filter((x) => x.kind === 'start_failed');
    expect(f.length).toBe(1);
    expect(f[0].evidence.stoppedIn).toBe('warm_up');
    expect(f[0].evidence.outcome).toBe('flame_lost_in_warmup');
    expect(f[0].grade).toBe('warning');
    expect(f[0].message).toContain('warm-up');
    expect(d.findings.some((x) => x.kind === 'chamber_unlit')).toBe(false);
    expect(counters).toMatchObject({ firedStarts: 1, failedStarts: 1, trips: 0 });
  });

  it('flame lost before the fuel was cut back: still a flame lost in warm-up, stopped just after flame', () => {
    const lossAt = ms(start.flameAt) + 3_000;
    expect(lossAt).toBeLessThan(ms(start.warmupAt));
    const { start: d } = only(failedStartBatch(b, lossAt));
    expect(d.outcome).toBe('flame_lost_in_warmup');
    expect(d.stoppedIn).toBe('flame_established');
  });

  it('fuel on without flame: failed to fire, not a fired start', () => {
    const firing = ms(start.firingAt);
    const batch = failedStartBatch(b, firing, { fuelOnS: 20, fuelKgS: start.firingFuelKgS, holdReadingsFromMs: firing });
    const { start: d, counters } = only(batch);
    expect(d.outcome).toBe('failed_to_fire');
    expect(d.stoppedIn).toBe('firing');
    expect(d.phases.map((p) => p.phase)).toEqual(['cranking', 'firing']);
    expect(d.firingSpeedPct!).toBeGreaterThan(18);
    expect(d.firingSpeedPct!).toBeLessThan(22.5);
    expect(d.findings.map((x) => x.kind)).toEqual(['start_failed']);
    expect(d.findings[0].evidence.stoppedIn).toBe('firing');
    expect(counters).toMatchObject({ firedStarts: 0, failedStarts: 1 });
  });

  it('flame lost while the fuel is still on: confirmed after a few seconds, the start ending where the flame went out', () => {
    const lossAt = ms(start.warmupAt) + 30_000;
    const { start: d } = only(failedStartBatch(b, lossAt, { fuelOnS: 10, fuelKgS: start.warmupFuelKgS }));
    expect(d.outcome).toBe('flame_lost_in_warmup');
    expect(Math.abs(d.endMs - lossAt)).toBeLessThanOrEqual(1000);
  });

  it('a flame detector dropping out for one ring while the fuel stays on is not a lost flame', () => {
    const c = structuredClone(b);
    let r = 0;
    while (c.tsMs[r] < ms(start.warmupAt) + 20_000) r++;
    c.flameDetected[r] = 0;
    const res = detectStarts(unit.config, startRings(c));
    const d = res.starts.find((x) => Math.abs(x.crankMs - ms(start.crankAt)) < 5000)!;
    expect(d.outcome).toBe('completed');
    expect(d.findings).toEqual([]);
  });

  it('a crank without fuel is not a start', () => {
    const firing = ms(start.firingAt);
    const batch = failedStartBatch(b, firing, { fuelOnS: 10, fuelKgS: 0, holdReadingsFromMs: firing });
    const res = detectStarts(unit.config, startRings(batch));
    expect(res.starts).toEqual([]);
    expect(res.counters).toMatchObject({ firedStarts: 0, failedStarts: 0 });
  });

  it('the same start run to the end is completed and raises nothing (the failures above are the failure, not the data)', () => {
    const res = detectStarts(unit.config, startRings(b));
    const d = res.starts.find((x) => Math.abs(x.crankMs - ms(start.crankAt)) < 5000)!;
    expect(d.outcome).toBe('completed');
    expect(d.findings).toEqual([]);
  });
});
