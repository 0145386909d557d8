/**
 * A simulated month of starts interleaved with steady running, normal stops and trips from
 * load, on units run three ways (peaking, cycling, base load with restarts after trips): every
 * start found with its outcome, trips and failed starts counted, fired hours equal to the time
 * the flame detectors saw flame. And the streaming detector fed batch by batch, its state
 * passed through JSON between batches, gives exactly what the batch form gives.
 */
import { describe, expect, it } from 'vitest';
import {
  applyStartEvents,
  createStartAnalyser,
  detectStarts,
  feedStartDetector,
  initialStartState,
  startCountersOf,
  type StartEvent,
  type StartRing,
} from '../../services/core/index.ts';
import { DEMO_SITES } from '../../services/sim/fleet.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import type { RingBatch, SimUnit } from '../../services/sim/types.ts';
import { matchStart, startRings } from './helpers.ts';

const FROM = '2026-01-01T00:00:00Z';
const TO = '2026-02-01T00:00:00Z';

function unit(id: string, dispatch: SimUnit['dispatch'], n: number, m: number, sense: 1 | -1, faults: SimUnit['faults'] = []): SimUnit {
  return {
    config: {
      id, name: id, site: 'Kestrel Fen', ratedPowerMw: 40, thermocouples: { count: m, firstAngleDeg: 4 }, chambers: { count: n, firstAngleDeg: 0 },
      swirl: { sense, curve: [[0.2, 80], [1.0, 50]], startupDeg: 95 }, temperatureUnit: 'C',
    },
    climate: DEMO_SITES['Kestrel Fen'],
    dispatch,
    faults,
  };
}

const units: SimUnit[] = [
  unit('month-peaking', { profile: 'peaking', tripsPerYear: 150, weekendRunChance: 0.6 }, 10, 18, 1, [
    { kind: 'crossfire_failure', chamber: 3, at: '2026-01-12T00:00:00Z' },
  ]),
  unit('month-cycling', { profile: 'cycling', tripsPerYear: 120 }, 12, 24, -1, [
    { kind: 'flame_loss', chamber: 5, at: '2026-01-20T11:00:00Z', tripAfterS: 40 },
  ]),
  unit('month-base', { profile: 'base', tripsPerYear: 80 }, 14, 21, 1),
];

function flameHours(b: RingBatch, gapMaxS: number): number {
  let s = 0;
  for (let r = 1; r < b.count; r++) if (b.flameDetected[r] && b.flameDetected[r - 1]) s += Math.min(gapMaxS, (b.tsMs[r] - b.tsMs[r - 1]) / 1000);
  return s / 3600;
}

describe('a simulated month of starts, running, stops and trips', () => {
  const figures: string[] = [];
  for (const u of units) {
    const sim = simulateUnit(u, { from: FROM, to: TO, seed: 17 });
    const b = sim.batch();
    const truth = sim.truth;
    const res = detectStarts(u.config, startRings(b));

    it(`${u.config.id}: every start found once with its outcome`, () => {
      expect(truth.starts.length).toBeGreaterThan(0);
      expect(res.starts.length).toBe(truth.starts.length);
      for (const t of truth.starts) {
        const d = matchStart(res.starts, t, 5);
        expect(d, t.id).toBeDefined();
        expect(d!.outcome, t.id).toBe(t.outcome);
      }
    });

    it(`${u.config.id}: trips, failed starts, fired starts and fired hours counted right`, () => {
      // Trips from load (or at full speed); a start aborted in acceleration is a failed start, not a trip.
      const tripsFromLoad = truth.trips.filter((t) => t.fromLoadMw > 0).length;
      const aborted = truth.starts.filter((t) => t.outcome === 'aborted').length;
      const c = res.counters;
      figures.push(`${u.config.id.padEnd(14)} starts ${res.starts.length}/${truth.starts.length}  fired ${c.firedStarts}  failed ${c.failedStarts}/${aborted}  trips ${c.trips}/${tripsFromLoad}  fired hours ${c.firedHours} / ${flameHours(b, 900).toFixed(2)}`);
      expect(c.trips).toBe(tripsFromLoad);
      expect(c.failedStarts).toBe(aborted);
      expect(c.firedStarts).toBe(truth.starts.length);
      expect(Math.abs(c.firedHours - flameHours(b, 900))).toBeLessThan(0.02);
      expect(res.starts.filter((s) => s.outcome === 'tripped_from_load').length).toBe(truth.starts.filter((s) => s.outcome === 'tripped_from_load').length);
      for (const s of res.starts.filter((x) => x.outcome === 'tripped_from_load')) expect(s.runEndedBy).toBe('trip');
    });

    it(`${u.config.id}: fed in uneven batches with the state through JSON, the same starts and counters`, () => {
      const an = createStartAnalyser(u.config);
      let state = initialStartState();
      const events: StartEvent[] = [];
      const batch: StartRing[] = [];
      let size = 1;
      const flush = () => {
        events.push(...feedStartDetector(createStartAnalyser(u.config), state, batch));
        state = JSON.parse(JSON.stringify(state));
        batch.length = 0;
        size = (size * 7 + 3) % 5000 + 1;
      };
      for (const r of startRings(b)) {
        batch.push({ ...r, exhaustC: Array.from(r.exhaustC) });
        if (batch.length >= size) flush();
      }
      flush();
      void an;
      const streamed = applyStartEvents([], events);
      expect(JSON.parse(JSON.stringify(streamed))).toEqual(JSON.parse(JSON.stringify(res.starts)));
      expect(startCountersOf(state)).toEqual(res.counters);
    });
  }

  it('a ring at or before the last one is ignored', () => {
    const u = units[0];
    const sim = simulateUnit(u, { from: FROM, to: '2026-01-04T00:00:00Z', seed: 17 });
    const rings = [...startRings(sim.batch())].map((r) => ({ ...r, exhaustC: Array.from(r.exhaustC) }));
    const once = detectStarts(u.config, rings);
    const twice = detectStarts(u.config, rings.flatMap((r, i) => (i % 50 === 0 ? [r, r] : [r])));
    expect(twice.starts.length).toBe(once.starts.length);
    expect(twice.counters).toEqual(once.counters);
  });

  it('prints the month figures', () => {
    console.log('Month of operation (detected / true):\n' + figures.join('\n'));
    expect(figures.length).toBe(units.length);
  });
});
