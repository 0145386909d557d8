/**
 * Start-up analysis, the worker's one step per analysed batch (inside its transaction, before
 * the alert rules run), `recordStartsForGroup`: feed each unit's rings to the core's streaming
 * start detector (services/core/start-detector.ts) with the state kept from the previous batch, hand
 * the starts it completes, the runs it ended and the new state and counters to the starts
 * repository (services/db/starts.ts) to store, and hand the start findings (chamber_unlit,
 * start_failed) to the alert rules by adding them to the batch's observations.
 *
 * Start findings are about a start, not about a ring: a chamber_unlit finding stays in force
 * until a later start lights that chamber, a start_failed finding until a later start
 * completes; while in force they are part of every observation of the batch, so the alert life
 * cycle (on-delay, off-delay, acknowledgement) applies to them like to any other finding.
 */
import type pg from 'pg';
import { createStartAnalyser, initialStartState, type StartAnalyser, type StartEvent, type StartRecord, type StartRing } from '../core/starts.ts';
import { applyStartEvents, feedStartDetector } from '../core/start-detector.ts';
import type { Finding } from '../core/findings.ts';
import type { UnitConfig } from '../core/types.ts';
import type { RingColumns } from '../db/analysis-rings.ts';
import {
  loadStartStatesForUpdate,
  noteStartError,
  saveStartStates,
  storeStartResults,
  type OpenStartFinding,
  type StartStateRow,
} from '../db/starts.ts';
import type { ConfigVersionRecord } from '../db/units.ts';

/** The configuration version in force at tMs (versions oldest first; null effectiveFrom = from the beginning). */
function versionAt(versions: readonly ConfigVersionRecord[], tMs: number): ConfigVersionRecord {
  let v = versions[0];
  for (const x of versions) if (x.effectiveFrom === null || Date.parse(x.effectiveFrom) <= tMs) v = x;
  return v;
}

const ANALYSERS = new Map<string, { version: number; analyser: StartAnalyser }>();
const MAX_ANALYSERS = 256;

function analyserFor(unitId: string, v: ConfigVersionRecord): StartAnalyser {
  const had = ANALYSERS.get(unitId);
  if (had && had.version === v.version) return had.analyser;
  const analyser = createStartAnalyser(v.config as UnitConfig);
  ANALYSERS.delete(unitId);
  ANALYSERS.set(unitId, { version: v.version, analyser });
  while (ANALYSERS.size > MAX_ANALYSERS) ANALYSERS.delete(ANALYSERS.keys().next().value as string);
  return analyser;
}

/** An alert observation as the worker builds them (ring time, findings at raise and hold levels). */
export interface BatchObservation {
  ts: Date;
  raise: Finding[];
  hold: Finding[];
}

/** Start findings in force after a start: a later start that lit a chamber clears its chamber_unlit; a completed one clears start_failed. */
function updateOpenFindings(open: OpenStartFinding[], s: StartRecord): OpenStartFinding[] {
  const failed = s.outcome === 'failed_to_fire' || s.outcome === 'flame_lost_in_warmup' || s.outcome === 'aborted';
  const litChambers = new Set((s.lighting?.chambers ?? []).filter((c) => c.litAfterS !== null).map((c) => c.chamber));
  const reported = new Set(s.findings.filter((f) => f.kind === 'chamber_unlit').map((f) => f.chamber));
  const next = open.filter((o) => {
    if (o.finding.kind === 'start_failed') return failed;
    if (o.finding.kind === 'chamber_unlit') return !(litChambers.has(o.finding.chamber!) && !reported.has(o.finding.chamber));
    return true;
  });
  for (const f of s.findings) {
    const i = next.findIndex((o) => o.finding.kind === f.kind && o.finding.chamber === f.chamber);
    const entry = { sinceMs: s.endMs, finding: f };
    if (i >= 0) next[i] = entry;
    else next.push(entry);
  }
  return next;
}

/** One unit's part of an analysed batch, for the start analysis. */
export interface StartBatchInput {
  unitId: string;
  rings: RingColumns;
  versions: readonly ConfigVersionRecord[];
  /** The batch's alert observations; start findings in force are merged into them. */
  observations: BatchObservation[];
}

/**
 * Feeds each unit's rings of an analysed batch to its start detector. The detector states of
 * all the units are read (and locked, in unit order) in one statement and written back in one;
 * only a unit whose batch completed a start or ended a run writes more, under a savepoint of its
 * own. A unit whose start analysis fails (the detector, or writing its starts) loses this batch's
 * start analysis (its observations are put back, and the error is noted in
 * start_state.last_error), never the ring analysis around it; a failure of the one write of the
 * states fails the round, which is retried whole.
 */
export async function recordStartsForGroup(client: pg.ClientBase, batch: readonly StartBatchInput[]): Promise<void> {
  const live = batch.filter((u) => u.rings.count > 0 && u.versions.length > 0);
  if (live.length === 0) return;
  const rows = await loadStartStatesForUpdate(client, live.map((u) => u.unitId));
  const toSave: Array<{ unitId: string; row: StartStateRow }> = [];
  for (const u of live) {
    const before = u.observations.map((o) => [o.raise, o.hold] as const);
    const count = u.observations.length;
    const restore = () => {
      u.observations.length = count;
      before.forEach(([raise, hold], i) => {
        u.observations[i].raise = raise;
        u.observations[i].hold = hold;
      });
    };
    let step: StartStep;
    try {
      step = startStep(u, rows.get(u.unitId) ?? null);
    } catch (err) {
      restore();
      await noteStartError(client, u.unitId, err, initialStartState());
      continue;
    }
    if (step.completed.length || step.runEnds.length) {
      try {
        await storeStartResults(client, u.unitId, step.completed, step.runEnds, step.row.configVersion);
      } catch (err) {
        restore();
        await noteStartError(client, u.unitId, err, initialStartState());
        continue;
      }
    }
    toSave.push({ unitId: u.unitId, row: step.row });
  }
  await saveStartStates(client, toSave);
}

interface StartStep {
  row: StartStateRow;
  completed: StartRecord[];
  runEnds: Array<Extract<StartEvent, { type: 'run_end' }>>;
}

/**
 * What one batch does to a unit's start detector, without writing: the new state, the starts
 * it completed and the runs it ended; start findings in force are merged into the batch's
 * observations in time order (and one observation is added at the end of a start with findings).
 */
function startStep(u: StartBatchInput, stored: StartStateRow | null): StartStep {
  const { unitId, rings, versions, observations } = u;
  const last = rings.tsMs[rings.count - 1];
  const version = versionAt(versions, last);
  const analyser = analyserFor(unitId, version);
  let row = stored;
  if (!row || row.configVersion !== version.version) {
    // A new configuration: the detector starts afresh; counters and findings in force carry over.
    const state = initialStartState();
    if (row) state.counters = row.state.counters;
    row = { configVersion: version.version, lastMs: row?.lastMs ?? null, state, open: row?.open ?? [] };
  }
  const input: StartRing[] = [];
  for (let j = 0; j < rings.count; j++) {
    const t = rings.tsMs[j];
    if (row.lastMs !== null && t <= row.lastMs) continue;
    const fuelFlowKgS = Number.isNaN(rings.fuelFlowKgS[j]) ? null : rings.fuelFlowKgS[j];
    const flameDetected = rings.flameDetected[j] < 0 ? null : rings.flameDetected[j] === 1;
    input.push({ tMs: t, speedPct: rings.speedPct[j], loadMw: rings.loadMw[j], ambientC: rings.ambientC[j], fuelFlowKgS, flameDetected, exhaustC: rings.exhaustC[j] });
  }
  const events = feedStartDetector(analyser, row.state, input);
  const completed = applyStartEvents([], events.filter((e) => e.type === 'start'));
  const runEnds = events.filter((e): e is Extract<StartEvent, { type: 'run_end' }> => e.type === 'run_end');

  // Start findings in force, merged into the batch's observations in time order.
  const byTime = completed.slice().sort((a, b) => a.endMs - b.endMs);
  const sortedObs = observations.slice().sort((a, b) => a.ts.getTime() - b.ts.getTime());
  let open = row.open;
  let i = 0;
  const withOpen = (o: BatchObservation) => {
    const fs = open.filter((x) => x.sinceMs <= o.ts.getTime()).map((x) => x.finding as unknown as Finding);
    if (fs.length) {
      o.raise = [...o.raise, ...fs];
      o.hold = [...o.hold, ...fs];
    }
  };
  for (const s of byTime) {
    while (i < sortedObs.length && sortedObs[i].ts.getTime() < s.endMs) withOpen(sortedObs[i++]);
    open = updateOpenFindings(open, s);
    // At the end of a start with findings: one observation with every start finding in force.
    if (s.findings.length) {
      const fs = open.map((x) => x.finding as unknown as Finding);
      observations.push({ ts: new Date(s.endMs), raise: fs, hold: fs });
    }
  }
  while (i < sortedObs.length) withOpen(sortedObs[i++]);
  row.open = open;
  row.lastMs = Math.max(row.lastMs ?? -Infinity, last);
  return { row, completed, runEnds };
}
