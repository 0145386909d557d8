/**
 * Named scenarios: a set of simulated units and a window, ready to write or to test against.
 * Each one shows one thing clearly (a healthy unit, a plugging nozzle, a flame loss, sensor
 * faults, start-ups, a wrong swirl curve), or the whole demo fleet.
 */
import { DEFAULT_DEMO_END, DEMO_SITES, HARBOUR_POINT_TYPE, demoFleet } from './fleet.ts';
import { toMs } from './generator.ts';
import { DAY_MS, HOUR_MS } from './operation.ts';
import type { SimUnit, TimeInput } from './types.ts';

export interface ScenarioOptions {
  /** Length of the window in days (default per scenario). */
  days?: number;
  /** End of the window (default DEFAULT_DEMO_END). */
  end?: TimeInput;
}

export interface Scenario {
  name: string;
  description: string;
  units: SimUnit[];
  from: number;
  to: number;
}

interface ScenarioDef {
  description: string;
  defaultDays: number;
  build: (from: number, to: number, days: number) => SimUnit[];
}

/** An eleven-chamber, twenty-thermocouple unit of the demo's Harbour Point type. */
function harbourPointUnit(id: string, name: string): SimUnit {
  return {
    config: {
      id, name, site: 'Harbour Point', ...HARBOUR_POINT_TYPE,
      swirl: { sense: 1, curve: [[0.2, 88], [0.6, 70], [1.0, 52]], startupDeg: 100 },
    },
    climate: DEMO_SITES['Harbour Point'],
    dispatch: { profile: 'base', tripsPerYear: 0 },
  };
}

const iso = (t: number) => new Date(t).toISOString();

export const SCENARIOS: Record<string, ScenarioDef> = {
  fleet: {
    description: 'the demo fleet: six units at three sites, a nozzle plugging, a thermocouple drifting, a start with a chamber that fails to crossfire',
    defaultDays: 90,
    build: (_from, to) => demoFleet(to),
  },
  healthy: {
    description: 'one healthy eleven-chamber unit at base load, no trips',
    defaultDays: 14,
    build: () => [harbourPointUnit('sim-healthy', 'Healthy unit')],
  },
  plugging: {
    description: 'a cycling unit whose chamber 4 fuel nozzle plugs over two weeks (15 % less fuel), starting on day 3',
    defaultDays: 21,
    build: (from) => [{
      ...harbourPointUnit('sim-plugging', 'Plugging unit'),
      dispatch: { profile: 'cycling', tripsPerYear: 0 },
      faults: [{ kind: 'nozzle_plugging', chamber: 4, at: iso(from + 2 * DAY_MS), days: 14, depthPct: 15 }],
    }],
  },
  'plugging-year': {
    description: 'a base-load unit over a year at one ring a minute, whose chamber 4 fuel nozzle plugs\nover two weeks (25 % less fuel) in its last quarter',
    defaultDays: 365,
    build: (from, _to, days) => [{
      ...harbourPointUnit('sim-year', 'Year unit'),
      faults: [{ kind: 'nozzle_plugging', chamber: 4, at: iso(from + Math.round(days * 0.8) * DAY_MS), days: 14, depthPct: 25 }],
    }],
  },
  'flame-loss': {
    description: 'a base-load unit that loses the flame in chamber 6 for three hours at noon on day 2',
    defaultDays: 4,
    build: (from) => [{
      ...harbourPointUnit('sim-flame-loss', 'Flame loss unit'),
      faults: [{ kind: 'flame_loss', chamber: 6, at: iso(from + DAY_MS + 12 * HOUR_MS), durationH: 3 }],
    }],
  },
  'hot-chamber': {
    description: 'a base-load unit whose chamber 7 runs hot (12 % more fuel) over five days from day 2',
    defaultDays: 10,
    build: (from) => [{
      ...harbourPointUnit('sim-hot', 'Hot chamber unit'),
      faults: [{ kind: 'hot_chamber', chamber: 7, at: iso(from + DAY_MS), excessPct: 12, rampDays: 5 }],
    }],
  },
  'tc-faults': {
    description: 'a base-load unit with four thermocouple faults: 3 opens on day 2, 8 drifts from day 3, 12 turns erratic on day 5, 15 freezes on day 7',
    defaultDays: 10,
    build: (from) => [{
      ...harbourPointUnit('sim-tc-faults', 'Thermocouple faults unit'),
      faults: [
        { kind: 'tc_open', thermocouple: 3, at: iso(from + DAY_MS + 9 * HOUR_MS) },
        { kind: 'tc_drift', thermocouple: 8, at: iso(from + 2 * DAY_MS), ratePerDayC: -2 },
        { kind: 'tc_erratic', thermocouple: 12, at: iso(from + 4 * DAY_MS + 3 * HOUR_MS), sigmaC: 12 },
        { kind: 'tc_frozen', thermocouple: 15, at: iso(from + 6 * DAY_MS + 14 * HOUR_MS) },
      ],
    }],
  },
  starts: {
    description: 'a peaking unit with daily starts; on day 3 chamber 5 lights 40 s late, on day 6 chamber 8 never lights and the start trips',
    defaultDays: 10,
    build: (from) => [{
      ...harbourPointUnit('sim-starts', 'Peaking unit'),
      dispatch: { profile: 'peaking', tripsPerYear: 0, weekendRunChance: 1 },
      faults: [
        { kind: 'crossfire_failure', chamber: 5, at: iso(from + 2 * DAY_MS), lateLightS: 40 },
        { kind: 'crossfire_failure', chamber: 8, at: iso(from + 5 * DAY_MS) },
      ],
    }],
  },
  'wrong-swirl': {
    description: 'a unit whose configured swirl curve is 25° short of the true one, with chamber 2 plugging so the cold plume lands where the configuration does not expect it',
    defaultDays: 21,
    build: (from) => {
      const u = harbourPointUnit('sim-wrong-swirl', 'Wrong swirl unit');
      return [{
        ...u,
        dispatch: { profile: 'cycling', tripsPerYear: 0 },
        physics: { trueSwirl: { sense: 1, curve: [[0.2, 113], [0.6, 95], [1.0, 77]], startupDeg: 125 } },
        faults: [{ kind: 'nozzle_plugging', chamber: 2, at: iso(from + 2 * DAY_MS), days: 10, depthPct: 15 }],
      }];
    },
  },
};

/** Names of all scenarios. */
export function scenarioNames(): string[] {
  return Object.keys(SCENARIOS);
}

/** Builds a named scenario; throws with the list of names when the name is unknown. */
export function buildScenario(name: string, opts: ScenarioOptions = {}): Scenario {
  const def = SCENARIOS[name];
  if (!def) throw new Error(`unknown scenario "${name}"; choose one of: ${scenarioNames().join(', ')}`);
  const days = opts.days ?? def.defaultDays;
  if (!(days > 0) || !Number.isFinite(days)) throw new Error(`days must be a positive number, got ${String(opts.days)}`);
  const to = toMs(opts.end ?? DEFAULT_DEMO_END, 'end');
  const from = to - Math.round(days * DAY_MS);
  return { name, description: def.description, units: def.build(from, to, days), from, to };
}
