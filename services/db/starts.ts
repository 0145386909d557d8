/**
 * Starts: every SQL statement about start-up analysis (tables starts and start_state), and the
 * one step the worker takes per analysed batch, `recordStartsForBatch`: feed the batch's rings
 * to the core's streaming start detector (services/core/starts.ts) with the state kept from the
 * previous batch, store the starts it completes, update the start counters, and hand the
 * start findings (chamber_unlit, start_failed) to the alert rules by adding them to the batch's
 * observations. It runs inside the worker's transaction and never begins or commits one.
 *
 * Start findings are about a start, not about a ring: a chamber_unlit finding stays in force
 * until a later start lights that chamber, a start_failed finding until a later start
 * completes; while in force they are part of every observation of the batch, so the alert life
 * cycle (on-delay, off-delay, acknowledgement) applies to them like to any other finding.
 */
import type pg from 'pg';
import {
  applyStartEvents,
  createStartAnalyser,
  feedStartDetector,
  initialStartState,
  type StartAnalyser,
  type StartDetectorState,
  type StartEvent,
  type StartFinding,
  type StartOutcome,
  type StartPhase,
  type StartRecord,
  type StartRing,
} from '../core/starts.ts';
import type { Finding } from '../core/findings.ts';
import type { UnitConfig } from '../core/types.ts';
import type { RingColumns } from './analysis.ts';
import type { ConfigVersionRecord } from './units.ts';

type Queryable = pg.Pool | pg.ClientBase;

// ---------------------------------------------------------------------------------------------
// Shapes served by the API (times RFC 3339, chambers from 1).

export interface StartPhaseRow {
  phase: StartPhase;
  startAt: string;
  durationS: number | null;
  speedPct: number | null;
}

export interface StartSummary {
  startId: string;
  crankAt: string;
  endAt: string;
  outcome: StartOutcome;
  stoppedIn: StartPhase | null;
  phases: StartPhaseRow[];
  firingSpeedPct: number | null;
  starterOffSpeedPct: number | null;
  firingFuelKgS: number | null;
  warmupFuelKgS: number | null;
  crossfireCompleteS: number | null;
  spreadEndOfWarmupC: number | null;
  spreadFsnlC: number | null;
  runEndAt: string | null;
  runEndedBy: 'stop' | 'trip' | null;
  /** Kinds and chambers of the start's findings, for lists. */
  findingKinds: string[];
  unlitChambers: number[];
}

export interface StartDetail extends StartSummary {
  flameSource: 'detector' | 'exhaust' | null;
  maxGapS: number;
  configVersion: number | null;
  lighting: {
    swirlDeg: number;
    windowEndAt: string;
    chambers: { chamber: number; litAfterS: number | null; endDeviationC: number | null; endDeficitFraction: number | null }[];
    unlitChambers: number[];
    lateChambers: { chamber: number; lateByS: number }[];
  } | null;
  findings: StartFinding[];
  trace: StartRecord['trace'];
}

export interface StartCountersRecord {
  unitId: string;
  firedStarts: number;
  failedStarts: number;
  trips: number;
  firedHours: number;
  lastStartAt: string | null;
  lastStartOutcome: StartOutcome | null;
}

const iso = (v: unknown): string | null => (v instanceof Date ? v.toISOString() : v == null ? null : String(v));
const num = (v: unknown): number | null => (v === null || v === undefined ? null : Number.isFinite(Number(v)) ? Number(v) : null);
const isoMs = (ms: number): string => new Date(ms).toISOString();

const SUMMARY_COLUMNS = `start_id, crank_at, end_at, outcome, stopped_in, phases, firing_speed_pct, starter_off_speed_pct,
  firing_fuel_kg_s, warmup_fuel_kg_s, crossfire_complete_s, spread_end_warmup_c, spread_fsnl_c, run_end_at, run_ended_by,
  findings, lighting`;

function summaryOf(r: Record<string, unknown>): StartSummary {
  const phases = (r.phases as { phase: StartPhase; startMs: number; durationS: number | null; speedPct: number | null }[]).map((p) => ({
    phase: p.phase,
    startAt: isoMs(p.startMs),
    durationS: p.durationS,
    speedPct: p.speedPct,
  }));
  const findings = (r.findings as StartFinding[]) ?? [];
  const lighting = r.lighting as StartRecord['lighting'];
  return {
    startId: String(r.start_id),
    crankAt: iso(r.crank_at)!,
    endAt: iso(r.end_at)!,
    outcome: r.outcome as StartOutcome,
    stoppedIn: (r.stopped_in as StartPhase | null) ?? null,
    phases,
    firingSpeedPct: num(r.firing_speed_pct),
    starterOffSpeedPct: num(r.starter_off_speed_pct),
    firingFuelKgS: num(r.firing_fuel_kg_s),
    warmupFuelKgS: num(r.warmup_fuel_kg_s),
    crossfireCompleteS: num(r.crossfire_complete_s),
    spreadEndOfWarmupC: num(r.spread_end_warmup_c),
    spreadFsnlC: num(r.spread_fsnl_c),
    runEndAt: iso(r.run_end_at),
    runEndedBy: (r.run_ended_by as 'stop' | 'trip' | null) ?? null,
    findingKinds: findings.map((f) => f.kind),
    unlitChambers: lighting?.unlitChambers ?? [],
  };
}

function detailOf(r: Record<string, unknown>): StartDetail {
  const s = summaryOf(r);
  const L = r.lighting as StartRecord['lighting'];
  return {
    ...s,
    flameSource: (r.flame_source as 'detector' | 'exhaust' | null) ?? null,
    maxGapS: num(r.max_gap_s) ?? 0,
    configVersion: num(r.config_version),
    lighting: L
      ? {
          swirlDeg: L.swirlDeg,
          windowEndAt: isoMs(L.windowEndMs),
          chambers: L.chambers.map((c) => ({ chamber: c.chamber, litAfterS: c.litAfterS, endDeviationC: c.endDeviationDegC, endDeficitFraction: c.endDeficitFraction })),
          unlitChambers: L.unlitChambers,
          lateChambers: L.lateChambers,
        }
      : null,
    findings: (r.findings as StartFinding[]) ?? [],
    trace: (r.trace as StartRecord['trace']) ?? [],
  };
}

function countersOf(r: Record<string, unknown>): StartCountersRecord {
  return {
    unitId: String(r.unit_id),
    firedStarts: Number(r.fired_starts ?? 0),
    failedStarts: Number(r.failed_starts ?? 0),
    trips: Number(r.trips ?? 0),
    firedHours: Math.round((Number(r.fired_seconds ?? 0) / 3600) * 100) / 100,
    lastStartAt: iso(r.last_start_at),
    lastStartOutcome: (r.last_start_outcome as StartOutcome | null) ?? null,
  };
}

// ---------------------------------------------------------------------------------------------
// Reads (API).

export interface StartsRepository {
  /** Starts of a unit with crank time in [from, to), newest first, at most limit. */
  list(unitId: string, fromMs: number, toMs: number, limit: number): Promise<StartSummary[]>;
  /** One start with its lighting, findings and time series, or null. */
  get(unitId: string, startId: string): Promise<StartDetail | null>;
  /**
   * Start counters (fired starts, failed starts, trips, fired hours, latest start) of the given
   * units, or of every unit when unitIds is null: for the unit status and fleet rows. Units the
   * worker has not yet followed get zeros.
   */
  counters(unitIds: string[] | null): Promise<StartCountersRecord[]>;
}

export function createStartsRepository(pool: Queryable): StartsRepository {
  return {
    async list(unitId, fromMs, toMs, limit) {
      const { rows } = await pool.query(
        `SELECT ${SUMMARY_COLUMNS} FROM starts WHERE unit_id = $1 AND crank_at >= $2 AND crank_at < $3 ORDER BY crank_at DESC LIMIT $4`,
        [unitId, new Date(fromMs), new Date(toMs), Math.max(1, Math.floor(limit))],
      );
      return rows.map(summaryOf);
    },
    async get(unitId, startId) {
      const { rows } = await pool.query(`SELECT ${SUMMARY_COLUMNS}, flame_source, max_gap_s, config_version, trace FROM starts WHERE unit_id = $1 AND start_id = $2`, [unitId, startId]);
      return rows.length ? detailOf(rows[0]) : null;
    },
    async counters(unitIds) {
      const { rows } = await pool.query(
        `SELECT u.id AS unit_id, s.fired_starts, s.failed_starts, s.trips, s.fired_seconds, l.crank_at AS last_start_at, l.outcome AS last_start_outcome
           FROM units u
           LEFT JOIN start_state s ON s.unit_id = u.id
           LEFT JOIN LATERAL (SELECT crank_at, outcome FROM starts WHERE unit_id = u.id ORDER BY crank_at DESC LIMIT 1) l ON true
          WHERE $1::text[] IS NULL OR u.id = ANY($1::text[])
          ORDER BY u.id`,
        [unitIds],
      );
      return rows.map(countersOf);
    },
  };
}

// ---------------------------------------------------------------------------------------------
// Writes (worker).

interface OpenFinding {
  sinceMs: number;
  finding: StartFinding;
}

interface StateRow {
  configVersion: number | null;
  lastMs: number | null;
  state: StartDetectorState;
  open: OpenFinding[];
}

async function loadStateForUpdate(client: pg.ClientBase, unitId: string): Promise<StateRow | null> {
  const { rows } = await client.query(`SELECT config_version, last_ts, state, open_findings FROM start_state WHERE unit_id = $1 FOR UPDATE`, [unitId]);
  if (!rows.length) return null;
  const r = rows[0];
  return { configVersion: num(r.config_version), lastMs: r.last_ts ? (r.last_ts as Date).getTime() : null, state: r.state as StartDetectorState, open: (r.open_findings as OpenFinding[]) ?? [] };
}

async function saveState(client: pg.ClientBase, unitId: string, row: StateRow): Promise<void> {
  const c = row.state.counters;
  await client.query(
    `INSERT INTO start_state (unit_id, config_version, last_ts, state, open_findings, fired_starts, failed_starts, trips, fired_seconds, updated_at)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, now())
     ON CONFLICT (unit_id) DO UPDATE SET config_version = EXCLUDED.config_version, last_ts = EXCLUDED.last_ts, state = EXCLUDED.state,
       open_findings = EXCLUDED.open_findings, fired_starts = EXCLUDED.fired_starts, failed_starts = EXCLUDED.failed_starts,
       trips = EXCLUDED.trips, fired_seconds = EXCLUDED.fired_seconds, updated_at = now()`,
    [unitId, row.configVersion, row.lastMs === null ? null : new Date(row.lastMs), JSON.stringify(row.state), JSON.stringify(row.open), c.firedStarts, c.failedStarts, c.trips, c.firedSeconds],
  );
}

/** Inserts or replaces a start. */
export async function upsertStart(client: Queryable, unitId: string, s: StartRecord, configVersion: number | null): Promise<void> {
  await client.query(
    `INSERT INTO starts (unit_id, start_id, crank_at, end_at, outcome, stopped_in, phases, firing_speed_pct, starter_off_speed_pct, firing_fuel_kg_s,
       warmup_fuel_kg_s, flame_source, crossfire_complete_s, lighting, spread_end_warmup_c, spread_fsnl_c, max_gap_s, run_end_at, run_ended_by,
       findings, trace, config_version, detected_at)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20, $21, $22, now())
     ON CONFLICT (unit_id, start_id) DO UPDATE SET crank_at = EXCLUDED.crank_at, end_at = EXCLUDED.end_at, outcome = EXCLUDED.outcome,
       stopped_in = EXCLUDED.stopped_in, phases = EXCLUDED.phases, firing_speed_pct = EXCLUDED.firing_speed_pct,
       starter_off_speed_pct = EXCLUDED.starter_off_speed_pct, firing_fuel_kg_s = EXCLUDED.firing_fuel_kg_s, warmup_fuel_kg_s = EXCLUDED.warmup_fuel_kg_s,
       flame_source = EXCLUDED.flame_source, crossfire_complete_s = EXCLUDED.crossfire_complete_s, lighting = EXCLUDED.lighting,
       spread_end_warmup_c = EXCLUDED.spread_end_warmup_c, spread_fsnl_c = EXCLUDED.spread_fsnl_c, max_gap_s = EXCLUDED.max_gap_s,
       run_end_at = EXCLUDED.run_end_at, run_ended_by = EXCLUDED.run_ended_by, findings = EXCLUDED.findings, trace = EXCLUDED.trace,
       config_version = EXCLUDED.config_version, detected_at = now()`,
    [
      unitId, s.id, new Date(s.crankMs), new Date(s.endMs), s.outcome, s.stoppedIn, JSON.stringify(s.phases), s.firingSpeedPct, s.starterOffSpeedPct,
      s.firingFuelKgS, s.warmupFuelKgS, s.flameSource, s.crossfireCompleteS, s.lighting ? JSON.stringify(s.lighting) : null, s.spreadEndOfWarmupDegC,
      s.spreadFsnlDegC, s.maxGapS, s.runEndMs === null ? null : new Date(s.runEndMs), s.runEndedBy, JSON.stringify(s.findings), JSON.stringify(s.trace), configVersion,
    ],
  );
}

/** Records the end of the run that followed a start (and a trip as the start's outcome). */
async function markRunEnd(client: Queryable, unitId: string, e: Extract<StartEvent, { type: 'run_end' }>): Promise<void> {
  if (e.startId === null) return;
  await client.query(
    `UPDATE starts SET run_end_at = $3, run_ended_by = $4,
       outcome = CASE WHEN $4 = 'trip' AND outcome = 'completed' THEN 'tripped_from_load' ELSE outcome END
     WHERE unit_id = $1 AND start_id = $2`,
    [unitId, e.startId, new Date(e.atMs), e.by],
  );
}

/** Fuel flow and flame of a unit's rings in [fromMs, toMs], by ring time (ms, rounded). */
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
function updateOpenFindings(open: OpenFinding[], s: StartRecord): OpenFinding[] {
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

/**
 * The worker's one step per analysed batch (inside its transaction, before the alert rules
 * run): feeds the batch's rings to the unit's start detector, stores completed starts and run
 * ends, saves the detector state and counters, and adds the start findings in force to the
 * batch's alert observations (plus one observation at the end of each start that has findings).
 * Returns the starts completed in this batch.
 */
export async function recordStartsForBatch(
  client: pg.ClientBase,
  unitId: string,
  rings: RingColumns,
  versions: readonly ConfigVersionRecord[],
  observations: BatchObservation[],
): Promise<StartRecord[]> {
  if (rings.count === 0 || versions.length === 0) return [];
  // Under a savepoint: a failure here loses this batch's start analysis (noted in start_state.last_error), never the ring analysis around it.
  const before = observations.map((o) => [o.raise, o.hold] as const);
  const count = observations.length;
  await client.query('SAVEPOINT start_analysis');
  try {
    const out = await recordStarts(client, unitId, rings, versions, observations);
    await client.query('RELEASE SAVEPOINT start_analysis');
    return out;
  } catch (err) {
    await client.query('ROLLBACK TO SAVEPOINT start_analysis');
    observations.length = count;
    before.forEach(([raise, hold], i) => {
      observations[i].raise = raise;
      observations[i].hold = hold;
    });
    await client.query(
      `INSERT INTO start_state (unit_id, state, last_error, last_error_at) VALUES ($1, $2, $3, now())
       ON CONFLICT (unit_id) DO UPDATE SET last_error = EXCLUDED.last_error, last_error_at = now()`,
      [unitId, JSON.stringify(initialStartState()), `${(err as Error).message ?? String(err)}`.slice(0, 2000)],
    );
    return [];
  }
}

async function recordStarts(
  client: pg.ClientBase,
  unitId: string,
  rings: RingColumns,
  versions: readonly ConfigVersionRecord[],
  observations: BatchObservation[],
): Promise<StartRecord[]> {
  const last = rings.tsMs[rings.count - 1];
  const version = versionAt(versions, last);
  const analyser = analyserFor(unitId, version);
  let row = await loadStateForUpdate(client, unitId);
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
  for (const s of completed) await upsertStart(client, unitId, s, version.version);
  for (const e of events) if (e.type === 'run_end') await markRunEnd(client, unitId, e);

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
  await saveState(client, unitId, row);
  return completed;
}
