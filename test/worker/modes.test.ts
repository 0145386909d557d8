/**
 * A unit alternating between two combustion modes with different ring patterns. The
 * simulator's healthy base-load unit supplies the rings; every six hours the site switches
 * between mode "a" and mode "b", and in mode "b" the fuel split moves heat from one side of
 * the ring to the other: +12 °C on thermocouples 2–4 and −12 °C on thermocouples 10–12 (a
 * pattern of our own making; the analysis is told only the mode codes). Baselines are fitted
 * per mode from the analyser's own steady rows of the first two days.
 * - With the modes sent: no finding from the mode change itself, the rings of each transfer are
 *   not steady and hold their findings, and a nozzle plugging on chamber 4 (the simulator's
 *   ground truth) is found in mode "b" as in mode "a".
 * - Control: the same rings without the codes, judged on one baseline, carry findings.
 */
import { describe, expect, it } from 'vitest';
import { baselineOptionsFor } from '../../services/core/baseline.ts';
import { baselineForMode, fitModalBaseline, type ModalBaseline } from '../../services/core/modes.ts';
import { defaultThresholds, type Finding } from '../../services/core/findings.ts';
import { loadConfig } from '../../services/db/config.ts';
import type { RingColumns } from '../../services/db/analysis-rings.ts';
import type { RingBatch, SimUnit } from '../../services/sim/types.ts';
import { UnitAnalyser, type AnalyserInputs } from '../../services/worker/unit-analyser.ts';
import { healthyUnit, simulate } from './fixtures.ts';

const HOUR = 3_600_000;
const FROM = '2026-02-02T00:00:00Z';
const SPLIT = Date.parse('2026-02-04T00:00:00Z');
const TO = '2026-02-06T00:00:00Z';
const settings = loadConfig({ LOG_LEVEL: 'silent' }).worker;
const modeAt = (ts: number) => (Math.floor(ts / (6 * HOUR)) % 2 === 0 ? 'a' : 'b');
const SHIFT: Record<number, number> = { 2: 12, 3: 12, 4: 12, 10: -12, 11: -12, 12: -12 };

function columns(b: RingBatch, lo: number, hi: number, withModes: boolean): RingColumns {
  const M = b.thermocoupleCount;
  const n = hi - lo;
  const c: RingColumns = {
    count: n, tsMs: b.tsMs.slice(lo, hi), loadMw: b.loadMw.slice(lo, hi), ambientC: b.ambientC.slice(lo, hi), ambientKPa: b.ambientKPa.slice(lo, hi), speedPct: b.speedPct.slice(lo, hi),
    exhaustC: [], fuelFlowKgS: b.fuelFlowKgS.slice(lo, hi), flameDetected: new Int8Array(n).fill(-1),
  };
  if (withModes) c.mode = [];
  for (let j = lo; j < hi; j++) {
    const ex = b.exhaustC.slice(j * M, (j + 1) * M);
    const mode = modeAt(b.tsMs[j]);
    if (mode === 'b') for (const [tc, d] of Object.entries(SHIFT)) ex[Number(tc) - 1] += d;
    c.exhaustC.push(ex);
    c.mode?.push(mode);
  }
  return c;
}

function inputsOf(unit: SimUnit, baseline: ModalBaseline | null): AnalyserInputs {
  const { id, name, site, ...config } = unit.config;
  return { unitId: id, versions: [{ version: 1, effectiveFrom: null, createdAt: new Date(0).toISOString(), config }], baseline, driftChambers: [], driftThermocouples: [], raise: defaultThresholds, hold: defaultThresholds, settings };
}

interface Judged { tsMs: number; mode: string; steady: boolean; findings: Finding[] | null; limit: number }

function run(unit: SimUnit, withModes: boolean): { baseline: ModalBaseline; after: Judged[] } {
  const b = simulate(unit, FROM, TO);
  const split = b.tsMs.findIndex((t) => t >= SPLIT);
  const fitter = new UnitAnalyser(inputsOf(unit, null));
  const ref = columns(b, 0, split, withModes);
  const samples = [];
  for (let j = 0; j < ref.count; j++) {
    const r = fitter.analyse(ref, j).row;
    if (r.steady) samples.push({ loadFraction: r.loadFraction, ringMeanDegC: r.ringMean, spreadDegC: r.spread, thermocoupleDeviationDegC: Array.from(r.tcDeviation), chamberDeviationDegC: Array.from(r.chamberDeviation), mode: ref.mode?.[j] ?? null });
  }
  const baseline = fitModalBaseline(samples, { version: 1, window: { from: FROM, to: new Date(SPLIT).toISOString() }, fittedAt: new Date(SPLIT).toISOString(), fittedBy: 'test' }, baselineOptionsFor(settings));
  const a = new UnitAnalyser(inputsOf(unit, baseline));
  const cols = columns(b, split, b.count, withModes);
  const after: Judged[] = [];
  for (let j = 0; j < cols.count; j++) {
    const r = a.analyse(cols, j);
    after.push({ tsMs: cols.tsMs[j], mode: modeAt(cols.tsMs[j]), steady: r.row.steady, findings: r.raise, limit: r.row.spreadLimit });
  }
  return { baseline, after };
}

const ringFindings = (f: Finding[] | null) => (f ?? []).filter((x) => x.kind.startsWith('chamber_') || x.kind.startsWith('spread_') || x.kind === 'thermocouple_fault');

describe('a unit alternating between two combustion modes', () => {
  const healthy = healthyUnit('md-1');
  const withModes = run(healthy, true);

  it('fits a baseline per mode from the window, beside the all-mode one', () => {
    expect(Object.keys(withModes.baseline.modes ?? {})).toEqual(['a', 'b']);
    // Mode b's normal for thermocouple 3 sits near 12 °C above mode a's (the pattern added; its
    // deviation is taken from the ring's level, which the shifted probes move a little too).
    const { modes } = withModes.baseline;
    const med = (bl: { bins: { median: number | null; count: number }[] }) => bl.bins.filter((x) => x.count >= 30 && x.median !== null).map((x) => x.median as number)[0];
    const d = med(modes!.b.thermocouples[2]) - med(modes!.a.thermocouples[2]);
    expect(d).toBeGreaterThan(9);
    expect(d).toBeLessThan(13);
  });

  it('no finding from the mode change itself; the transfer rings are not steady and hold their findings', () => {
    const named = withModes.after.flatMap((x) => ringFindings(x.findings));
    expect(named).toEqual([]);
    // Right after each change (within the steady-state window): not steady, no observation.
    const changes = withModes.after.filter((x, i) => i > 0 && x.mode !== withModes.after[i - 1].mode);
    expect(changes.length).toBeGreaterThanOrEqual(6);
    for (const c of changes) {
      const inside = withModes.after.filter((x) => x.tsMs >= c.tsMs && x.tsMs < c.tsMs + settings.steadyWindowS * 1000);
      expect(inside.length).toBeGreaterThan(0);
      for (const x of inside) {
        expect(x.steady).toBe(false);
        expect(x.findings).toBeNull();
      }
    }
    expect(withModes.after.filter((x) => x.steady).length).toBeGreaterThan(withModes.after.length / 2);
  });

  it('control: the same rings without their mode codes, on one baseline, carry findings', () => {
    const control = run(healthy, false);
    expect(control.baseline.modes).toBeUndefined();
    expect(control.after.flatMap((x) => ringFindings(x.findings)).length).toBeGreaterThan(0);
  });

  it('a nozzle plugging on chamber 4 is still found, in mode b as in mode a', () => {
    const plugged: SimUnit = { ...healthy, faults: [{ kind: 'nozzle_plugging', chamber: 4, at: new Date(SPLIT + 2 * HOUR).toISOString(), days: 0.25, depthPct: 30 }] };
    const { after } = run(plugged, true);
    const cold4 = (mode: string) => after.filter((x) => x.mode === mode && (x.findings ?? []).some((f) => f.kind === 'chamber_cold' && f.chamber === 4)).length;
    expect(cold4('b')).toBeGreaterThan(50);
    expect(cold4('a')).toBeGreaterThan(50);
  });

  it('a thin mode falls back to the all-mode baseline with a caution; a unit without modes has none', () => {
    expect(baselineForMode(withModes.baseline, 'c')).toMatchObject({ baseline: withModes.baseline, caution: expect.stringContaining('Mode c had too few steady rings') });
    expect(baselineForMode(withModes.baseline, 'b').caution).toBeNull();
    expect(baselineForMode(withModes.baseline, null)).toEqual({ baseline: withModes.baseline, caution: null });
  });

  it('a mode given its own spread limit in the unit configuration is judged by it; the other mode keeps the learnt one', () => {
    const unit: SimUnit = { ...healthy, config: { ...healthy.config, modes: { b: { spreadLimitC: 61.5 } } } };
    const { after } = run(unit, true);
    const limits = (mode: string) => [...new Set(after.filter((x) => x.mode === mode && x.steady).map((x) => x.limit))];
    expect(limits('b')).toEqual([61.5]);
    expect(limits('a')).not.toContain(61.5);
  });
});
