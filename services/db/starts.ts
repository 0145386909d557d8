/**
 * Starts repository: every SQL statement about start-up analysis (tables starts and
 * start_state). Reads for the API (starts, one start, the counters); writes for the worker
 * (services/worker/starts.ts), which runs the start detector and hands over what to store: the
 * detector states and counters, the starts completed and the runs ended, an error. Statements
 * run in the caller's transaction; none begins or commits one.
 */
import type pg from 'pg';
import type { StartDetectorState, StartEvent, StartFinding, StartOutcome, StartPhase, StartRecord } from '../core/starts.ts';

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

/** A start finding in force since a start's end (ms). */
export interface OpenStartFinding {
  sinceMs: number;
  finding: StartFinding;
}

/** A unit's start detector as stored: the configuration version it follows, its last ring, its state, the findings in force. */
export interface StartStateRow {
  configVersion: number | null;
  lastMs: number | null;
  state: StartDetectorState;
  open: OpenStartFinding[];
}

/** The detector states of these units, read and locked (in unit order: writers of the same units never deadlock). */
export async function loadStartStatesForUpdate(client: pg.ClientBase, unitIds: string[]): Promise<Map<string, StartStateRow>> {
  const { rows } = await client.query(
    `SELECT unit_id, config_version, last_ts, state, open_findings FROM start_state WHERE unit_id = ANY($1::text[]) ORDER BY unit_id FOR UPDATE`,
    [unitIds],
  );
  return new Map(
    rows.map((r) => [r.unit_id as string, { configVersion: num(r.config_version), lastMs: r.last_ts ? (r.last_ts as Date).getTime() : null, state: r.state as StartDetectorState, open: (r.open_findings as OpenStartFinding[]) ?? [] }]),
  );
}

/** Writes the detector states and counters of many units in one statement. */
export async function saveStartStates(client: pg.ClientBase, states: Array<{ unitId: string; row: StartStateRow }>): Promise<void> {
  if (states.length === 0) return;
  const payload = states.map(({ unitId, row }) => {
    const c = row.state.counters;
    return { unit_id: unitId, config_version: row.configVersion, last_ts: row.lastMs === null ? null : new Date(row.lastMs).toISOString(), state: row.state, open_findings: row.open, fired_starts: c.firedStarts, failed_starts: c.failedStarts, trips: c.trips, fired_seconds: c.firedSeconds };
  });
  await client.query(
    `INSERT INTO start_state (unit_id, config_version, last_ts, state, open_findings, fired_starts, failed_starts, trips, fired_seconds, updated_at)
     SELECT x.unit_id, x.config_version, x.last_ts, x.state, x.open_findings, x.fired_starts, x.failed_starts, x.trips, x.fired_seconds, now()
       FROM jsonb_to_recordset($1::jsonb) AS x(unit_id text, config_version integer, last_ts timestamptz, state jsonb, open_findings jsonb,
            fired_starts integer, failed_starts integer, trips integer, fired_seconds double precision)
      ORDER BY x.unit_id
     ON CONFLICT (unit_id) DO UPDATE SET config_version = EXCLUDED.config_version, last_ts = EXCLUDED.last_ts, state = EXCLUDED.state,
       open_findings = EXCLUDED.open_findings, fired_starts = EXCLUDED.fired_starts, failed_starts = EXCLUDED.failed_starts,
       trips = EXCLUDED.trips, fired_seconds = EXCLUDED.fired_seconds, updated_at = now()`,
    [JSON.stringify(payload)],
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

/**
 * Stores the starts a batch completed and the runs it ended, under a savepoint: on a failure
 * nothing of them is kept, the caller's transaction goes on, and the error is thrown.
 */
export async function storeStartResults(client: pg.ClientBase, unitId: string, completed: readonly StartRecord[], runEnds: ReadonlyArray<Extract<StartEvent, { type: 'run_end' }>>, configVersion: number | null): Promise<void> {
  await client.query('SAVEPOINT start_analysis');
  try {
    for (const c of completed) await upsertStart(client, unitId, c, configVersion);
    for (const e of runEnds) await markRunEnd(client, unitId, e);
    await client.query('RELEASE SAVEPOINT start_analysis');
  } catch (err) {
    await client.query('ROLLBACK TO SAVEPOINT start_analysis');
    throw err;
  }
}

/**
 * Notes that a unit's start analysis of a batch failed (start_state.last_error). A stored
 * detector state is left as it was; a unit without one gets `fresh`.
 */
export async function noteStartError(client: pg.ClientBase, unitId: string, err: unknown, fresh: StartDetectorState): Promise<void> {
  await client.query(
    `INSERT INTO start_state (unit_id, state, last_error, last_error_at) VALUES ($1, $2, $3, now())
     ON CONFLICT (unit_id) DO UPDATE SET last_error = EXCLUDED.last_error, last_error_at = now()`,
    [unitId, JSON.stringify(fresh), `${(err as Error).message ?? String(err)}`.slice(0, 2000)],
  );
}
