/**
 * A unit's analysis memory reaches its final size within its first rings and then holds, at
 * one ring a second and at one a minute: many analysers are fed steady rings in service, and
 * the live objects and bytes they hold (counted after a full collection) are compared between
 * an early ring and one past every window (steady state 10 minutes, window tests 30 minutes,
 * recent validity codes 30 rings). No timing is measured.
 */
import { runInNewContext } from 'node:vm';
import { queryObjects, setFlagsFromString } from 'node:v8';
import { describe, expect, it } from 'vitest';
import { defaultThresholds } from '../../services/core/findings.ts';
import { loadConfig } from '../../services/db/config.ts';
import type { RingColumns } from '../../services/db/analysis-rings.ts';
import { UnitAnalyser } from '../../services/worker/unit-analyser.ts';
import { healthyUnit } from './fixtures.ts';

setFlagsFromString('--expose-gc');
const gc = runInNewContext('gc') as () => void;

const { id, name, site, ...unitConfig } = healthyUnit('mem').config;
const TC = unitConfig.thermocouples.count;
const settings = loadConfig({ LOG_LEVEL: 'silent' }).worker;
const T0 = Date.UTC(2026, 0, 5);

function analyser(u: number): UnitAnalyser {
  return new UnitAnalyser({
    unitId: `mem-${u}`,
    versions: [{ version: 1, effectiveFrom: null, createdAt: new Date(0).toISOString(), config: unitConfig }],
    baseline: null,
    driftChambers: [],
    driftThermocouples: [],
    raise: defaultThresholds,
    hold: defaultThresholds,
    settings,
  });
}

/** Rings from index `from` to `to` (exclusive) of unit u, `everyS` apart: steady running at 25 MW, a little noise. */
function rings(u: number, from: number, to: number, everyS: number): RingColumns {
  const count = to - from;
  const c: RingColumns = {
    count,
    tsMs: new Float64Array(count),
    loadMw: new Float64Array(count).fill(25 + (u % 7) * 0.3),
    ambientC: new Float64Array(count).fill(14.2),
    ambientKPa: new Float64Array(count).fill(100.8),
    speedPct: new Float64Array(count).fill(100),
    exhaustC: [],
    fuelFlowKgS: new Float64Array(count).fill(NaN),
    flameDetected: new Int8Array(count).fill(-1),
  };
  for (let j = 0; j < count; j++) {
    const s = from + j;
    c.tsMs[j] = T0 + s * everyS * 1000;
    const ex = new Float64Array(TC);
    for (let k = 0; k < TC; k++) ex[k] = Math.round((548 + 9 * Math.sin((k / TC) * 2 * Math.PI + u) + (((s * 7 + k * 13 + u) % 11) - 5) * 0.08) * 10) / 10;
    c.exhaustC.push(ex);
  }
  return c;
}

/** Feeds every analyser its rings up to index `to`, in batches of 60 as the worker reads them. */
function feed(analysers: UnitAnalyser[], done: number[], to: number, everyS: number): void {
  analysers.forEach((a, u) => {
    for (let from = done[u]; from < to; from += 60) {
      const batch = rings(u, from, Math.min(to, from + 60), everyS);
      for (let j = 0; j < batch.count; j++) a.analyse(batch, j);
    }
    done[u] = to;
  });
}

interface Held {
  bytes: number;
  float64Arrays: number;
  uint8Arrays: number;
  arrays: number;
}

function held(): Held {
  gc();
  gc();
  const m = process.memoryUsage();
  return {
    bytes: m.heapUsed + m.arrayBuffers,
    float64Arrays: queryObjects(Float64Array, { format: 'count' }) as number,
    uint8Arrays: queryObjects(Uint8Array, { format: 'count' }) as number,
    arrays: queryObjects(Array, { format: 'count' }) as number,
  };
}

/** Growth per unit of what the analysers hold, from ring `early` to ring `late`. */
function growth(units: number, everyS: number, early: number, late: number): Held {
  // A unit of its own first, so the code is compiled before anything is counted.
  feed([analyser(-1)], [0], late, everyS);
  const analysers = Array.from({ length: units }, (_, u) => analyser(u));
  const done = analysers.map(() => 0);
  feed(analysers, done, early, everyS);
  const a = held();
  feed(analysers, done, late, everyS);
  const b = held();
  expect(analysers.every((x) => x.lastTsMs === T0 + (late - 1) * everyS * 1000)).toBe(true);
  return {
    bytes: (b.bytes - a.bytes) / units,
    float64Arrays: (b.float64Arrays - a.float64Arrays) / units,
    uint8Arrays: (b.uint8Arrays - a.uint8Arrays) / units,
    arrays: (b.arrays - a.arrays) / units,
  };
}

describe('a unit analyser holds the same memory once its first rings are in', () => {
  // Before, at one ring a second: every ring the window tests kept was a Float64Array of its
  // own (up to 121 of them, 30 minutes to fill), and the steady-state window's arrays grew for
  // 10 minutes: some 60 kB a unit. At one ring a minute: the recent validity codes were a
  // Uint8Array per ring until 30 were held, and the window tests' rings a Float64Array each
  // until 31 were: some 7 kB a unit.
  it.each([
    // rate, from ring, to ring, units, seconds between rings, most bytes a unit may grow by
    ['one ring a second', 60, 1900, 40, 1, 8192],
    ['one ring a minute', 20, 120, 240, 60, 3072],
  ] as const)('at %s, from ring %i to ring %i', (_rate, early, late, units, everyS, mostBytes) => {
    const g = growth(units, everyS, early, late);
    expect(g.float64Arrays).toBeLessThan(0.5);
    expect(g.uint8Arrays).toBeLessThan(0.5);
    expect(g.arrays).toBeLessThan(0.5);
    expect(g.bytes).toBeLessThan(mostBytes);
  });
});
