/**
 * A simulated unit run through the worker's ring analysis (UnitAnalyser) without a database: a
 * baseline fitted from the analyser's own steady rows of the first days, then every later ring
 * analysed against it, with its findings kept. The simulator's truth (plume width, swirl,
 * faults) is its own; the analyser is told only the unit's configuration.
 */
import { baselineOptionsFor, fitUnitBaseline, type BaselineSample, type UnitBaseline } from '../../services/core/baseline.ts';
import { defaultThresholds, type Finding } from '../../services/core/findings.ts';
import { loadConfig } from '../../services/db/config.ts';
import type { RingColumns } from '../../services/db/analysis-rings.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import type { RingBatch, SimUnit } from '../../services/sim/types.ts';
import { UnitAnalyser, type AnalyserInputs } from '../../services/worker/unit-analyser.ts';

const settings = loadConfig({ LOG_LEVEL: 'silent' }).worker;

function columns(b: RingBatch, lo: number, hi: number): RingColumns {
  const n = hi - lo;
  const m = b.thermocoupleCount;
  const c: RingColumns = {
    count: n, tsMs: b.tsMs.slice(lo, hi), loadMw: b.loadMw.slice(lo, hi), ambientC: b.ambientC.slice(lo, hi), ambientKPa: b.ambientKPa.slice(lo, hi), speedPct: b.speedPct.slice(lo, hi),
    exhaustC: [], fuelFlowKgS: b.fuelFlowKgS.slice(lo, hi), flameDetected: new Int8Array(n).fill(-1),
  };
  for (let j = lo; j < hi; j++) c.exhaustC.push(b.exhaustC.slice(j * m, (j + 1) * m));
  return c;
}

/** A baseline (version 1, window [from, to)) fitted from the steady rows the analyser makes of the rings `ref`. */
export function fitFromAnalysedRows(fitter: UnitAnalyser, ref: RingColumns, from: string, to: string): UnitBaseline {
  const samples: BaselineSample[] = [];
  for (let j = 0; j < ref.count; j++) {
    const r = fitter.analyse(ref, j).row;
    if (r.steady) samples.push({ loadFraction: r.loadFraction, ringMeanDegC: r.ringMean, spreadDegC: r.spread, thermocoupleDeviationDegC: Array.from(r.tcDeviation), chamberDeviationDegC: Array.from(r.chamberDeviation) });
  }
  return fitUnitBaseline(samples, { version: 1, window: { from, to }, fittedAt: to, fittedBy: 'test' }, baselineOptionsFor(settings));
}

export interface ScenarioRing {
  tsMs: number;
  steady: boolean;
  findings: Finding[];
  tcResidual: number[] | null;
  validity: number[];
}

/** Analyses `unit` from `from` to `to`; the baseline is fitted on [from, baselineTo). */
export function runScenario(unit: SimUnit, o: { from: string; baselineTo: string; to: string; seed?: number; steadyIntervalS?: number }): ScenarioRing[] {
  const b = simulateUnit(unit, { from: o.from, to: o.to, seed: o.seed ?? 7, steadyIntervalS: o.steadyIntervalS ?? 60 }).batch();
  const { id, name, site, ...config } = unit.config;
  void name, site;
  const inputs = (over: Partial<AnalyserInputs> = {}): AnalyserInputs => ({
    unitId: id, versions: [{ version: 1, effectiveFrom: null, createdAt: new Date(0).toISOString(), config }], baseline: null, driftChambers: [], driftThermocouples: [], raise: defaultThresholds, hold: defaultThresholds, settings, ...over,
  });
  const split = b.tsMs.findIndex((t) => t >= Date.parse(o.baselineTo));
  const baseline = fitFromAnalysedRows(new UnitAnalyser(inputs()), columns(b, 0, split), o.from, o.baselineTo);
  const a = new UnitAnalyser(inputs({ baseline }));
  const rest = columns(b, split, b.count);
  const out: ScenarioRing[] = [];
  for (let j = 0; j < rest.count; j++) {
    const r = a.analyse(rest, j);
    out.push({ tsMs: rest.tsMs[j], steady: r.row.steady, findings: r.raise ?? [], tcResidual: r.row.tcResidual ? Array.from(r.row.tcResidual) : null, validity: Array.from(r.row.validity) });
  }
  return out;
}
