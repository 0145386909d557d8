/**
 * The analyser's windows of recent rings (services/worker/windows.ts) against plain-array
 * models of what they hold: the steady-state test equals steadyState over the samples a plain
 * array keeps (in time order, exactly those of the window); the window tests' rings are those
 * the keeping rule keeps; the recent codes count what the last rings say. And their sizes: set
 * from the ring rate within the first rings, then held.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { defaultSteadyStateOptions, steadyState } from '../../services/core/correction.ts';
import { capacityFor, FIRST_CAPACITY, ReadingsWindow, RecentCodes, SteadyWindow } from '../../services/worker/windows.ts';

const opts = { ...defaultSteadyStateOptions, windowS: 600 };

describe('SteadyWindow', () => {
  it('gives the steady-state test steadyState gives over the samples left after dropping those older than the window from the front', () => {
    // In time order those are exactly the samples of the window; out of order (a sample before
    // the one pushed last) the window is scanned as it stands.
    const sample = fc.record({ dt: fc.oneof(fc.constant(1), fc.double({ min: 0, max: 120, noNaN: true })), load: fc.oneof(fc.double({ min: 0.5, max: 0.52, noNaN: true }), fc.constant(NaN)) });
    fc.assert(
      fc.property(fc.array(sample, { minLength: 1, maxLength: 400 }), fc.boolean(), (xs, backwards) => {
        const w = new SteadyWindow(opts.windowS);
        const times: number[] = [];
        const loads: number[] = [];
        let t = 1_000_000;
        xs.forEach((x, i) => {
          t += backwards && i === xs.length - 5 ? -300 : x.dt;
          times.push(t);
          loads.push(x.load);
          while (times.length > 0 && times[0] < t - opts.windowS) {
            times.shift();
            loads.shift();
          }
          w.push(t, x.load);
          expect(w.steadyAt(100, t, opts)).toEqual(steadyState(100, times, loads, t, opts));
        });
      }),
      { numRuns: 200 },
    );
  });

  it('is sized for its window at the ring rate once its first rings are in, then holds that size', () => {
    const w = new SteadyWindow(600);
    for (let s = 0; s < FIRST_CAPACITY; s++) w.push(s, 0.5);
    expect(w.capacity).toBe(FIRST_CAPACITY);
    w.push(FIRST_CAPACITY, 0.5);
    expect(w.ringSpacingS).toBe(1);
    expect(w.capacity).toBe(capacityFor(600, 1));
    for (let s = FIRST_CAPACITY + 1; s < 7200; s++) w.push(s, 0.5 + (s % 13) * 1e-4);
    expect(w.capacity).toBe(capacityFor(600, 1));
    expect(w.count).toBe(601);
  });

  it('grows again when the rings come faster', () => {
    const w = new SteadyWindow(600);
    let t = 0;
    for (let i = 0; i < 100; i++) w.push((t += 60), 0.5);
    expect(w.capacity).toBe(FIRST_CAPACITY);
    for (let i = 0; i < 2000; i++) w.push((t += 0.5), 0.5);
    expect(w.count).toBe(1201);
    expect(w.capacity).toBeGreaterThanOrEqual(1201);
    const cap = w.capacity;
    for (let i = 0; i < 2000; i++) w.push((t += 0.5), 0.5);
    expect(w.capacity).toBe(cap);
  });
});

/** The window tests' rings as the analyser kept them in plain arrays. */
function keptModel(windowMs: number, rings: number) {
  const t: number[] = [];
  const r: number[][] = [];
  const spacing = windowMs / (2 * rings);
  return {
    t,
    r,
    push(tsMs: number, readings: number[], inService: boolean) {
      if (inService && (t.length === 0 || tsMs - t[t.length - 1] >= spacing || tsMs < t[t.length - 1])) {
        t.push(tsMs);
        r.push(readings);
      }
      let k = 0;
      while (k < t.length && t[k] < tsMs - windowMs) k++;
      t.splice(0, k);
      r.splice(0, k);
    },
  };
}

describe('ReadingsWindow', () => {
  it('keeps the rings the keeping rule keeps, with their readings, at any rate', () => {
    const ring = fc.record({ dtS: fc.oneof(fc.constant(1), fc.constant(60), fc.integer({ min: 0, max: 900 })), inService: fc.boolean(), m: fc.constantFrom(20, 20, 20, 24) });
    fc.assert(
      fc.property(fc.array(ring, { minLength: 1, maxLength: 600 }), (xs) => {
        const w = new ReadingsWindow(30 * 60_000, 60);
        const model = keptModel(30 * 60_000, 60);
        let t = 0;
        for (const [i, x] of xs.entries()) {
          t += x.dtS * 1000;
          const readings = Array.from({ length: x.m }, (_, k) => 500 + i + k / 100);
          w.push(t, Float64Array.from(readings), 0.5, x.inService);
          model.push(t, readings, x.inService);
        }
        expect(w.times()).toEqual(model.t);
        expect(w.count).toBeLessThanOrEqual(w.bound);
        for (const m of [20, 24]) {
          const { rings } = w.pick(m, 1000);
          expect(rings.map((v) => [...v])).toEqual(model.r.filter((v) => v.length === m));
        }
      }),
      { numRuns: 200 },
    );
  });

  it('picks at most the asked number, evenly spread, the newest among them', () => {
    const w = new ReadingsWindow(30 * 60_000, 60);
    for (let s = 0; s <= 1800; s++) w.push(s * 1000, new Float64Array(20).fill(s), s / 1800, true);
    expect(w.count).toBe(121);
    // One in three of the 121 kept, counted back from the newest.
    const { rings, loads } = w.pick(20, 60);
    expect(rings.length).toBe(41);
    expect(rings[rings.length - 1][0]).toBe(1800);
    expect(rings[0][0]).toBe(0);
    expect(loads[loads.length - 1]).toBe(1);
  });

  it('holds no more than its bound, with rings out of time order too', () => {
    const w = new ReadingsWindow(30 * 60_000, 60);
    for (let s = 0; s < 2000; s++) w.push((s % 2 ? 1800 - s / 2 : 1800 + s) * 1000, new Float64Array(20).fill(s), 0.5, true);
    expect(w.count).toBeLessThanOrEqual(w.bound);
    expect(w.capacity).toBeLessThanOrEqual(w.bound);
  });

  it('is sized by the ring rate it is given and holds that size', () => {
    const w = new ReadingsWindow(30 * 60_000, 60);
    w.reserve(1000);
    expect(w.capacity).toBe(w.bound);
    for (let s = 0; s < 7200; s++) w.push(s * 1000, new Float64Array(20), 0.5, true);
    expect(w.capacity).toBe(w.bound);
    const slow = new ReadingsWindow(30 * 60_000, 60);
    for (let s = 0; s < 24 * 60; s++) slow.push(s * 60_000, new Float64Array(20), 0.5, true);
    expect(slow.count).toBe(31);
    expect(slow.capacity).toBe(capacityFor(30 * 60_000, 60_000));
  });
});

describe('RecentCodes', () => {
  it('counts the outliers and gaps of the last rings', () => {
    fc.assert(
      fc.property(fc.array(fc.array(fc.integer({ min: 0, max: 3 }), { minLength: 3, maxLength: 6 }), { minLength: 1, maxLength: 80 }), fc.integer({ min: 1, max: 40 }), (rings, cap) => {
        const c = new RecentCodes(cap, 4, 1, 2);
        for (const r of rings) c.push(Uint8Array.from(r));
        const last = rings.slice(-cap);
        for (let i = 0; i < 4; i++) {
          expect(c.outliers[i]).toBe(last.filter((r) => r[i] === 1).length);
          expect(c.missing[i]).toBe(last.filter((r) => r[i] === 2).length);
        }
      }),
      { numRuns: 200 },
    );
  });
});
