/**
 * Faults recorded in the ground truth show in the rings as the fault says: thermocouple open,
 * drifting, erratic, frozen; flame loss (sudden, deep, over adjacent thermocouples, at the
 * chamber's plume); hot chamber; plugging depth.
 */
import { describe, expect, it } from 'vitest';
import { thermocoupleAnglesDeg } from '../../services/core/geometry.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { buildScenario } from '../../services/sim/scenarios.ts';
import type { RingBatch } from '../../services/sim/types.ts';
import { arcDeg, coldCentreDeg, mean, plumeByHandDeg, std } from './helpers.ts';

function column(b: RingBatch, tc: number): Float64Array {
  const m = b.thermocoupleCount;
  const out = new Float64Array(b.count);
  for (let r = 0; r < b.count; r++) out[r] = b.exhaustC[r * m + tc - 1];
  return out;
}

function ringMeans(b: RingBatch, exclude: number[] = []): Float64Array {
  const m = b.thermocoupleCount;
  const out = new Float64Array(b.count);
  for (let r = 0; r < b.count; r++) {
    let s = 0, n = 0;
    for (let i = 0; i < m; i++) if (!exclude.includes(i + 1)) { s += b.exhaustC[r * m + i]; n++; }
    out[r] = s / n;
  }
  return out;
}

describe('thermocouple faults (scenario tc-faults)', () => {
  const s = buildScenario('tc-faults');
  const unit = s.units[0];
  const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 4 });
  const twin = simulateUnit({ ...unit, faults: [] }, { from: s.from, to: s.to, seed: 4 });
  const b = sim.batch();
  const h = twin.batch();
  const truth = sim.truth;
  const fault = (kind: string) => truth.faults.find((f) => f.kind === kind)!;
  const idx = (iso: string) => b.tsMs.findIndex((t) => t >= Date.parse(iso));

  it('records four thermocouple faults with their thermocouple numbers (from 1) and times', () => {
    expect(truth.faults.map((f) => [f.kind, f.thermocouple])).toEqual([['tc_open', 3], ['tc_drift', 8], ['tc_erratic', 12], ['tc_frozen', 15]]);
    expect(h.count).toBe(b.count);
  });

  it('open circuit: thermocouple 3 reads far below ambient from its time on, normally before', () => {
    const f = fault('tc_open');
    const k = idx(f.at);
    const tc3 = column(b, 3);
    expect(Math.max(...tc3.subarray(0, k))).toBeGreaterThan(400);
    for (let r = k; r < b.count; r++) expect(tc3[r]).toBe(f.params.readsC);
    expect(f.params.readsC as number).toBeLessThan(-20);
  });

  it('drift: thermocouple 8 departs from its healthy twin at the recorded rate, its neighbours do not', () => {
    const f = fault('tc_drift');
    const rate = f.params.ratePerDayC as number;
    const at = Date.parse(f.at);
    const d8 = column(b, 8).map((v, r) => v - h.exhaustC[r * b.thermocoupleCount + 7]);
    const d7 = column(b, 7).map((v, r) => v - h.exhaustC[r * b.thermocoupleCount + 6]);
    for (let r = 0; r < b.count; r += 97) {
      const days = Math.max(0, (b.tsMs[r] - at) / 86_400_000);
      expect(d8[r]).toBeCloseTo(rate * days, 0);
      expect(d7[r]).toBe(0);
    }
    expect(Math.min(...d8)).toBeLessThan(rate * 5);
  });

  it('erratic: thermocouple 12 sample-to-sample scatter is many times its neighbours’ after the fault, normal before', () => {
    const f = fault('tc_erratic');
    const k = idx(f.at);
    const diffStd = (col: Float64Array, a: number, z: number) => std(Array.from(col.subarray(a + 1, z), (v, i) => v - col[a + i]));
    const tc12 = column(b, 12), tc11 = column(b, 11), tc13 = column(b, 13);
    const after = diffStd(tc12, k, k + 2000);
    expect(after).toBeGreaterThan(8 * diffStd(tc11, k, k + 2000));
    expect(after).toBeGreaterThan(8 * diffStd(tc13, k, k + 2000));
    expect(diffStd(tc12, k - 2000, k)).toBeLessThan(2 * diffStd(tc11, k - 2000, k) + 0.5);
  });

  it('frozen: thermocouple 15 stops changing while the ring mean moves', () => {
    const f = fault('tc_frozen');
    const k = idx(f.at);
    const tc15 = column(b, 15).subarray(k);
    expect(new Set(tc15).size).toBe(1);
    expect(tc15[0]).toBeCloseTo(f.params.frozenAtC as number, 1);
    const means = ringMeans(b, [3, 8, 12, 15]).subarray(k);
    expect(Math.max(...means) - Math.min(...means)).toBeGreaterThan(3);
  });
});

describe('chamber faults', () => {
  it('flame loss: sudden, at least 100 °C deep over two or more adjacent thermocouples at the chamber’s plume, and it ends when recorded', () => {
    const s = buildScenario('flame-loss');
    const unit = s.units[0];
    const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 8 });
    const twin = simulateUnit({ ...unit, faults: [] }, { from: s.from, to: s.to, seed: 8 });
    const f = sim.truth.faults[0];
    expect(f.kind).toBe('flame_loss');
    // Chamber 6 of 11, first at 0°: 5 × 32.727° = 163.64°, plus the swirl (sense +1) off this curve.
    expect(unit.config.chambers).toEqual({ count: 11, firstAngleDeg: 0 });
    expect(unit.config.swirl.curve).toEqual([[0.2, 88], [0.6, 70], [1, 52]]);
    expect(f.chamber).toBe(6);
    const at = Date.parse(f.at), until = Date.parse(f.until!);
    const b = sim.batch(), h = twin.batch();
    const m = b.thermocoupleCount;
    const angles = thermocoupleAnglesDeg(unit.config);
    let inside = 0;
    for (let r = 0; r < b.count; r++) {
      const dev = Array.from({ length: m }, (_, i) => b.exhaustC[r * m + i] - h.exhaustC[r * m + i]);
      const t = b.tsMs[r];
      if (t < at || t >= until) {
        expect(Math.min(...dev)).toBe(0);
        continue;
      }
      inside++;
      // Against the rest of the ring (the governor holds load, so the other chambers warm a little).
      const med = [...dev].sort((x, y) => x - y)[Math.floor(m / 2)];
      const deep = dev.map((v, i) => (v - med < -100 ? i : -1)).filter((i) => i >= 0);
      expect(deep.length).toBeGreaterThanOrEqual(2);
      const sorted = [...dev].map((v, i) => [v, i]).sort((x, y) => x[0] - y[0]);
      const [a, c] = [sorted[0][1], sorted[1][1]];
      expect(Math.abs(a - c) === 1 || Math.abs(a - c) === m - 1).toBe(true);
      const op = sim.operatingPointAt(t);
      const lc = op.loadMw / unit.config.ratedPowerMw / ((op.ambientKPa / 101.325) * Math.sqrt((op.ambientC + 273.15) / 288.15));
      expect(arcDeg(coldCentreDeg(angles, dev), plumeByHandDeg(0, 11, 5, 1, [[0.2, 88], [0.6, 70], [1, 52]], lc))).toBeLessThan(5);
    }
    expect(inside).toBe(180); // three hours of rings at one a minute
  });

  it('hot chamber: a warm plume at the chamber’s plume angle growing over the recorded ramp', () => {
    const s = buildScenario('hot-chamber');
    const unit = s.units[0];
    const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 8 });
    const twin = simulateUnit({ ...unit, faults: [] }, { from: s.from, to: s.to, seed: 8 });
    const f = sim.truth.faults[0];
    const angles = thermocoupleAnglesDeg(unit.config);
    const peak = (t: string) => {
      const dev = sim.healthyReadingsAt(t)!.map((v, i) => v - twin.healthyReadingsAt(t)![i]);
      return { max: Math.max(...dev), centre: coldCentreDeg(angles, dev.map((v) => -v)) };
    };
    const at = Date.parse(f.at);
    const early = peak(new Date(at + 86_400_000).toISOString());
    const late = peak(new Date(at + 6 * 86_400_000).toISOString());
    expect(late.max).toBeGreaterThan(10);
    expect(early.max).toBeLessThan(late.max * 0.4);
    // Chamber 7 of 11, first at 0°, at base load (swirl 52°, sense +1): 6 × 360/11 + 52 = 248.36°.
    expect(unit.config.chambers).toEqual({ count: 11, firstAngleDeg: 0 });
    expect(unit.config.swirl.curve.at(-1)).toEqual([1, 52]);
    expect(f.chamber).toBe(7);
    expect(arcDeg(late.centre, 248.36)).toBeLessThan(8);
  });

  it('nozzle plugging: the plume deepens over the recorded days, then holds', () => {
    const s = buildScenario('plugging');
    const unit = s.units[0];
    const sim = simulateUnit(unit, { from: s.from, to: s.to, seed: 8 });
    const twin = simulateUnit({ ...unit, faults: [] }, { from: s.from, to: s.to, seed: 8 });
    const f = sim.truth.faults[0];
    const full = Date.parse(f.params.fullDepthAt as string);
    const at = Date.parse(f.at);
    const depth = (t: number) => {
      const iso = new Date(t).toISOString();
      const a = sim.healthyReadingsAt(iso)!, b = twin.healthyReadingsAt(iso)!;
      return Math.min(...Array.from(a, (v, i) => v - b[i]));
    };
    // At the same local hour (same dispatch state) on several days.
    const noon = (t: number) => Math.floor(t / 86_400_000) * 86_400_000 + 13 * 3_600_000;
    const d0 = depth(noon(at) - 86_400_000), dHalf = depth(noon((at + full) / 2)), dFull = depth(noon(full) + 86_400_000), dLater = depth(noon(full) + 3 * 86_400_000);
    expect(d0).toBe(0);
    expect(dHalf).toBeLessThan(-5);
    expect(dFull).toBeLessThan(dHalf * 1.5);
    expect(Math.abs(dLater - dFull)).toBeLessThan(0.25 * Math.abs(dFull));
    expect(mean([dFull])).toBeLessThan(-15);
  });
});
