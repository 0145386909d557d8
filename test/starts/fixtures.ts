/** A stored start for tests of the start routes (auth matrix and others): one completed start of a unit. */
import type { Pool } from '../../services/db/pool.ts';
import { upsertStart } from '../../services/db/starts.ts';
import type { StartRecord } from '../../services/core/starts.ts';

export const AUTH_START_ID = 'start-20260101T060000Z';

/** Stores a small completed start with id AUTH_START_ID for the unit. */
export async function seedStart(pool: Pool, unitId: string): Promise<void> {
  const crank = Date.parse('2026-01-01T06:00:00Z');
  const at = (s: number) => crank + s * 1000;
  const s: StartRecord = {
    id: AUTH_START_ID,
    crankMs: crank,
    endMs: at(900),
    outcome: 'completed',
    stoppedIn: null,
    phases: [
      { phase: 'cranking', startMs: at(0), durationS: 90, speedPct: 0 },
      { phase: 'firing', startMs: at(90), durationS: 2, speedPct: 20 },
      { phase: 'flame_established', startMs: at(92), durationS: 8, speedPct: 20 },
      { phase: 'warm_up', startMs: at(100), durationS: 120, speedPct: 20 },
      { phase: 'acceleration', startMs: at(220), durationS: 200, speedPct: 21.5 },
      { phase: 'starter_disengaged', startMs: at(420), durationS: 200, speedPct: 70 },
      { phase: 'full_speed_no_load', startMs: at(620), durationS: 100, speedPct: 100 },
      { phase: 'synchronised', startMs: at(720), durationS: 1, speedPct: 100 },
      { phase: 'loading', startMs: at(721), durationS: 179, speedPct: 100 },
    ],
    firingSpeedPct: 20,
    starterOffSpeedPct: 70,
    firingFuelKgS: 0.1,
    warmupFuelKgS: 0.05,
    flameSource: 'detector',
    lighting: {
      swirlDeg: 100,
      windowEndMs: at(220),
      chambers: Array.from({ length: 10 }, (_, k) => ({ chamber: k + 1, litAfterS: 1, endDeviationDegC: 0, endDeficitFraction: 0 })),
      crossfireCompleteS: 2,
      unlitChambers: [],
      lateChambers: [],
    },
    crossfireCompleteS: 2,
    spreadEndOfWarmupDegC: 8,
    spreadFsnlDegC: 20,
    maxGapS: 1,
    runEndMs: null,
    runEndedBy: null,
    findings: [],
    trace: [0, 90, 100, 220, 620, 900].map((s, i) => ({ tMs: at(s), speedPct: [0, 20, 20, 21.5, 100, 100][i], loadMw: s >= 720 ? 5 : 0, fuelFlowKgS: s >= 90 ? 0.08 : 0, flame: s >= 92, meanDegC: 100, spreadDegC: 10, chamberDegC: s === 100 ? Array(10).fill(0) : null })),
  };
  await upsertStart(pool, unitId, s, 1);
}
