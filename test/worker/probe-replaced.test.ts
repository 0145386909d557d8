/**
 * A thermocouple replaced: the new probe reads 3 °C higher than the old one (inside the class-2
 * tolerance of ±2.5 °C or 0.75 % of reading, IEC 60584-1, from memory: at 550 °C that is
 * ±4.1 °C). The simulator's healthy demo unit supplies the rings (its truth knows nothing of the
 * analyser's baseline or offsets); the step is added to probe 7 from the event on. With the
 * event recorded, the analyser learns the new offset from the next steady rings and shows no
 * thermocouple or chamber finding; without it (the control) the same rings leave the probe's
 * residual 3 °C off its normal.
 */
import { describe, expect, it } from 'vitest';
import { defaultThresholds, type Finding } from '../../services/core/findings.ts';
import { loadConfig } from '../../services/db/config.ts';
import type { RingColumns } from '../../services/db/analysis-rings.ts';
import type { RingBatch } from '../../services/sim/types.ts';
import { UnitAnalyser, type AnalyserInputs } from '../../services/worker/unit-analyser.ts';
import { healthyUnit, simulate } from './fixtures.ts';
import { fitFromAnalysedRows } from './scenario.ts';

const unit = healthyUnit('pr-1');
const { id, name, site, ...config } = unit.config;
const M = config.thermocouples.count;
const PROBE = 7;
const STEP_C = 3;
const settings = loadConfig({ LOG_LEVEL: 'silent' }).worker;
const K = settings.probeOffsetRings;

function columns(b: RingBatch, lo: number, hi: number, stepFromMs = Infinity): RingColumns {
  const n = hi - lo;
  const c: RingColumns = {
    count: n, tsMs: b.tsMs.slice(lo, hi), loadMw: b.loadMw.slice(lo, hi), ambientC: b.ambientC.slice(lo, hi), ambientKPa: b.ambientKPa.slice(lo, hi), speedPct: b.speedPct.slice(lo, hi),
    exhaustC: [], fuelFlowKgS: b.fuelFlowKgS.slice(lo, hi), flameDetected: new Int8Array(n).fill(-1),
  };
  for (let j = lo; j < hi; j++) {
    const ex = b.exhaustC.slice(j * M, (j + 1) * M);
    if (b.tsMs[j] >= stepFromMs) ex[PROBE - 1] += STEP_C;
    c.exhaustC.push(ex);
  }
  return c;
}

function inputs(over: Partial<AnalyserInputs> = {}): AnalyserInputs {
  return { unitId: id, versions: [{ version: 1, effectiveFrom: null, createdAt: new Date(0).toISOString(), config }], baseline: null, driftChambers: [], driftThermocouples: [], raise: defaultThresholds, hold: defaultThresholds, settings, ...over };
}

describe('a thermocouple replaced with a 3 °C offset step', () => {
  const b = simulate(unit, '2026-02-02T00:00:00Z', '2026-02-05T00:00:00Z');
  const split = b.tsMs.findIndex((t) => t >= Date.parse('2026-02-04T00:00:00Z'));
  const eventMs = Date.parse('2026-02-04T06:00:00Z');

  // The baseline: two days of the healthy unit, from the analyser's own steady rows.
  const baseline = fitFromAnalysedRows(new UnitAnalyser(inputs()), columns(b, 0, split), '2026-02-02T00:00:00Z', '2026-02-04T00:00:00Z');

  function run(withEvent: boolean) {
    const a = new UnitAnalyser(inputs({ baseline, replacements: withEvent ? [{ eventId: 'e1', atMs: eventMs, thermocouple: PROBE - 1, learntOffsetC: null }] : [] }));
    const day = columns(b, split, b.count, eventMs);
    const after: Array<{ tsMs: number; steady: boolean; residual: number; all: number[]; findings: Finding[] }> = [];
    const learnt: number[] = [];
    for (let j = 0; j < day.count; j++) {
      const r = a.analyse(day, j);
      for (const l of r.learnt ?? []) learnt.push(l.offsetC);
      if (day.tsMs[j] >= eventMs) after.push({ tsMs: day.tsMs[j], steady: r.row.steady, residual: r.row.tcResidual ? r.row.tcResidual[PROBE - 1] : NaN, all: r.row.tcResidual ? Array.from(r.row.tcResidual) : [], findings: r.raise ?? [] });
    }
    return { after, learnt };
  }

  it('is learnt from the next steady rings: no thermocouple or chamber finding, the residual back within 1 °C after the configured count', () => {
    const { after, learnt } = run(true);
    const steady = after.filter((x) => x.steady);
    expect(steady.length).toBeGreaterThan(K + 100);
    const named = after.flatMap((x) => x.findings).filter((f) => f.thermocouple === PROBE || f.kind.startsWith('chamber_'));
    expect(named).toEqual([]);
    // One offset learnt, near the step (the simulator's noise and load changes make it not exact).
    expect(learnt).toHaveLength(1);
    expect(Math.abs(learnt[0] - STEP_C)).toBeLessThan(0.7);
    // Back within 1 °C: every hourly median of its residual (as the trends show it) after the
    // configured count of steady rings. Ring by ring a healthy probe of this simulator wanders
    // up to about 0.9 °C (95th percentile of |residual|), so the replaced one is held to that:
    // no worse than the worst of the others.
    const rest = steady.slice(K);
    const hours = new Map<number, number[]>();
    for (const x of rest) hours.set(Math.floor(x.tsMs / 3_600_000), [...(hours.get(Math.floor(x.tsMs / 3_600_000)) ?? []), x.residual]);
    const med = (v: number[]) => [...v].sort((p, q) => p - q)[Math.floor(v.length / 2)];
    expect(hours.size).toBeGreaterThan(10);
    for (const v of hours.values()) expect(Math.abs(med(v))).toBeLessThan(1);
    const p95 = (i: number) => [...rest.map((x) => Math.abs(x.all[i]))].sort((p, q) => p - q)[Math.floor(rest.length * 0.95)];
    const others = Array.from({ length: M }, (_, i) => i).filter((i) => i !== PROBE - 1).map(p95);
    expect(p95(PROBE - 1)).toBeLessThanOrEqual(Math.max(...others) + 0.05);
  });

  it('control: without the event the same rings leave the probe 3 °C off its normal', () => {
    const { after, learnt } = run(false);
    const res = after.filter((x) => x.steady).slice(K).map((x) => x.residual).sort((p, q) => p - q);
    expect(learnt).toEqual([]);
    expect(res[Math.floor(res.length / 2)]).toBeGreaterThan(STEP_C - 0.7);
  });
});
