/**
 * The analysis pipeline of one unit. A round is one transaction: check the lease (and lock the
 * claim row), read the next rings after the watermark (binary COPY), analyse them in time
 * order, write their analysis (delete + COPY of the span), merge their rollups, advance the
 * watermark, log the batch and hand the alert observations to the alert rules, then COMMIT:
 * all of it or none, so a crash never loses or repeats a ring. Late rings (at or before the
 * watermark, without analysis) are analysed by re-running their span with the memory of the
 * rings before it, and the hours and days they touch are recomputed from stored analysis.
 */
import { periodEvents, probeReplacements, recordLearntOffset } from '../db/events.ts';
import { baselinePeriodAt, baselineStanding } from '../core/baseline-periods.ts';
import type { LearntOffset } from './probe-offsets.ts';
import type { Thresholds } from '../core/findings.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import { withTransaction, type Pool } from '../db/pool.ts';
import { advanceProgress, countUnanalysed, lockOwnedUnit, lockProgress, logBatch, recordInOrderBatches, setRollupsTo, lockUnits, type UnitProgress } from '../db/progress.ts';
import { AnalysisEncoder, writeAnalysis } from '../db/analysis-write.ts';
import { deleteRollupBuckets, readRollupBucketsMany, writeRollupsMany, insertRollupsMany, type RollupRow, readRollupBuckets, readRollups, writeRollups } from '../db/rollups.ts';
import { lastSteadySpread, readAnalysis, readLastAnalysis, firstAnalysisAfter } from '../db/analysis.ts';
import { readRingsAfterMany, type RingColumns, readRingsBetween } from '../db/analysis-rings.ts';
import { inForceAt, listBaselines, type BaselineRecord } from '../db/baselines.ts';
import { driftStateStamp, readDriftStates, type DriftStateRecord } from '../db/drift.ts';
import { unitVersions } from '../db/units.ts';
import type { Queryable } from '../db/alert-rows.ts';
import type { ChamberDriftInput } from '../core/findings.ts';
import { applyAlertObservations, type AlertSettings } from './alerts.ts';
import { announceHistoricAlerts } from '../db/alert-changes.ts';
import { finishReanalysisReached, rewindTo, takeAlertMark } from '../db/reanalysis.ts';
import { KINDS_NOT_REANALYSED } from '../db/config.ts';
import { recordStartsForGroup, type BatchObservation } from './starts.ts';
import { bucketOf, DAY_MS, daysFromHours, HOUR_MS, RollupAccumulator, ROLLUP_METRICS } from './rollups.ts';
import { UnitAnalyser, type AnalyserInputs } from './unit-analyser.ts';
import { runDriftForUnit } from './drift.ts';

export interface PipelineContext {
  pool: Pool;
  logger: Logger;
  config: Config;
  /** null: no lease check (tools and tests that run without a claiming worker). */
  workerId: string | null;
  alertSettings: AlertSettings;
  raise: Thresholds;
  hold: Thresholds;
  /** Per-unit memory kept between rounds. */
  memory: Map<string, UnitMemory>;
  /**
   * Keep the rollups of a unit receiving rings live in memory and write them every
   * ROLLUP_HOLD_MS (or when the hour turns) instead of with every round. Only for a worker that
   * flushes them (on its timer, when settled and when it stops); off for tools and tests that
   * call the pipeline directly.
   */
  holdRollups?: boolean;
}

export interface UnitMemory {
  analyser: UnitAnalyser | null;
  /** The watermark the analyser's memory is as of. */
  watermarkMs: number | null;
  inputs: AnalyserInputs | null;
  inputsLoadedAt: number;
  /** The unit's baseline versions, oldest first, as last read. */
  baselines: BaselineRecord[] | null;
  /** The version the inputs hold (in force at the rings being analysed; -1: not chosen yet). */
  baselineVersion: number | null;
  driftStamp: number | null;
  driftStates: DriftStateRecord[] | null;
  /** Wall time of the last look for the first steady ring (units without a baseline). */
  lastAutoFitCheck: number;
  /** When the first baseline is due (first steady ring + baselineAutoDays), once known. */
  autoFitDueMs: number | null;
  autoFitFromMs: number | null;
  /** The last batch stopped at autoFitDueMs: the first baseline is fitted before any later ring. */
  autoFitDueReached: boolean;
  /**
   * A baseline period started by maintenance (fuel nozzles, an inspection, tuning) whose rings
   * are judged on a baseline from before the work: the automatic fit from the period's start
   * falls due at dueMs in ring time (core/baseline-periods.ts), and `reached` says the last
   * batch stopped there, so the fit comes before any later ring.
   */
  periodFit: { fromMs: number; dueMs: number; reached: boolean } | null;
  /**
   * Rollups of in-order rings analysed and committed but not written yet: exactly the rings after
   * the stored rollups_to up to the watermark. Kept only together with the analyser's memory.
   */
  rollups: RollupAccumulator | null;
  /** Wall time the held rollups were started. */
  rollupsSince: number;
  /**
   * History was analysed (or, for a memory just made, may have been) since alerts found in
   * history were last announced: the next batch that is not history announces them.
   */
  historySinceAnnounced: boolean;
}

/** Longest a unit's rollups are held in memory before they are written. */
export const ROLLUP_HOLD_MS = 10_000;
/** A round holds its rollups only when it analysed at most this many rings of the unit… */
const HOLD_MAX_RINGS = 16;
/** …and its newest ring is at most this old (live arrival, not a backlog). */
const HOLD_MAX_AGE_MS = 5 * 60_000;

/** Inputs (configuration versions, baseline, drift) are re-read at most this often. */
const INPUTS_TTL_MS = 30_000;
const NO_CLAIM = 'no lease check';

export function memoryOf(pc: PipelineContext, unitId: string): UnitMemory {
  let m = pc.memory.get(unitId);
  if (!m)
    pc.memory.set(
      unitId,
      (m = { analyser: null, watermarkMs: null, inputs: null, inputsLoadedAt: 0, baselines: null, baselineVersion: null, driftStamp: null, driftStates: null, lastAutoFitCheck: 0, autoFitDueMs: null, autoFitFromMs: null, autoFitDueReached: false, periodFit: null, rollups: null, rollupsSince: 0, historySinceAnnounced: true }),
    );
  return m;
}

/** Forgets the unit's inputs so the next round re-reads them (after a baseline fit or drift run). */
export function invalidateInputs(pc: PipelineContext, unitId: string): void {
  const m = pc.memory.get(unitId);
  if (m) m.inputsLoadedAt = 0;
}

/**
 * The unit's analysis inputs for rings from ring time atMs on, with the baseline in force then
 * (and its drift states), and the ring time at which another baseline takes over (untilMs: a
 * batch stops before it). Configuration versions and baselines are re-read at most every
 * INPUTS_TTL_MS, on the round's own connection `q`: a round holds its transaction's connection,
 * so taking more from the pool would let rounds in flight wait for each other's connections
 * (and the nightly drift's) until the pool's wait times out.
 */
async function loadInputs(pc: PipelineContext, q: Queryable, unitId: string, mem: UnitMemory, atMs: number): Promise<{ inputs: AnalyserInputs; untilMs: number }> {
  const now = Date.now();
  if (!mem.inputs || !mem.baselines || now - mem.inputsLoadedAt >= INPUTS_TTL_MS) {
    // Spread the re-reads of a fleet's units over time rather than all at once.
    const jitter = Math.floor(Math.random() * (INPUTS_TTL_MS / 3));
    const versions = await unitVersions(q, unitId);
    if (versions.length === 0) throw new Error(`unit ${unitId} has no configuration`);
    mem.baselines = (await listBaselines(q, unitId)).reverse();
    const stamp = await driftStateStamp(q, unitId);
    const replacements = await probeReplacements(q, unitId);
    const periods = await periodEvents(q, unitId);
    if (stamp !== mem.driftStamp) mem.driftStates = null;
    mem.driftStamp = stamp;
    mem.inputs = { unitId, versions, baseline: null, driftChambers: [], driftThermocouples: [], raise: pc.raise, hold: pc.hold, settings: pc.config.worker, replacements, periods };
    mem.baselineVersion = -1;
    mem.inputsLoadedAt = now - jitter;
  }
  const { current, untilMs } = inForceAt(mem.baselines, atMs);
  const version = current?.version ?? null;
  if (version !== mem.baselineVersion) {
    // Read once a baseline is in force (none is read, or kept as empty, before): drift states belong to one.
    if (current) mem.driftStates ??= await readDriftStates(q, unitId);
    const driftChambers: (ChamberDriftInput | null)[] = [];
    const driftThermocouples: (ChamberDriftInput | null)[] = [];
    for (const s of current ? (mem.driftStates ?? []) : []) if (s.baselineVersion === version) (s.subject === 'chamber' ? driftChambers : driftThermocouples)[s.idx - 1] = { cusum: s.cusum, rate: s.rate };
    for (let k = 0; k < driftChambers.length; k++) driftChambers[k] ??= null;
    for (let i = 0; i < driftThermocouples.length; i++) driftThermocouples[i] ??= null;
    mem.inputs = { ...(mem.inputs as AnalyserInputs), baseline: current ? current.baseline : null, driftChambers, driftThermocouples };
    mem.baselineVersion = version;
    if (mem.analyser) mem.analyser.setInputs(mem.inputs);
  }
  return { inputs: mem.inputs as AnalyserInputs, untilMs };
}

async function lockUnit(pc: PipelineContext, client: Parameters<typeof lockOwnedUnit>[0], unitId: string): Promise<UnitProgress | null> {
  return pc.workerId === null ? lockProgress(client, unitId) : lockOwnedUnit(client, unitId, pc.workerId);
}

/** A fresh analyser whose memory is that of the stored history up to and including atMs. */
async function primedAnalyser(client: Parameters<typeof lockOwnedUnit>[0], unitId: string, inputs: AnalyserInputs, atMs: number | null): Promise<UnitAnalyser> {
  const analyser = new UnitAnalyser(inputs);
  if (atMs === null) return analyser;
  const from = analyser.contextStartMs(atMs);
  const [rings, recent, prev] = [
    await readRingsBetween(client, unitId, from, atMs, 10_000_000),
    await readLastAnalysis(client, unitId, atMs, inputs.settings.recentRings),
    await lastSteadySpread(client, unitId, atMs),
  ];
  analyser.prime(rings, recent, prev);
  return analyser;
}

const r0 = (ms: number) => Math.round(ms);

/** How many of the rings (in time order) fall on the UTC day `day` (days since the epoch). */
function ringsOfDay(rings: RingColumns, day: number): number {
  return countBefore(rings, rings.count, (day + 1) * DAY_MS);
}

/** How many of the first n rings (in time order) come before ring time endMs. */
function countBefore(rings: RingColumns, n: number, endMs: number): number {
  let k = 0;
  while (k < n && rings.tsMs[k] < endMs) k++;
  return k;
}

/** The first n rings. */
function sliceRings(rings: RingColumns, n: number): RingColumns {
  return {
    count: n,
    tsMs: rings.tsMs.subarray(0, n),
    loadMw: rings.loadMw.subarray(0, n),
    ambientC: rings.ambientC.subarray(0, n),
    ambientKPa: rings.ambientKPa.subarray(0, n),
    speedPct: rings.speedPct.subarray(0, n),
    exhaustC: rings.exhaustC.slice(0, n),
    fuelFlowKgS: rings.fuelFlowKgS.subarray(0, n),
    flameDetected: rings.flameDetected.subarray(0, n),
    ...(rings.mode ? { mode: rings.mode.slice(0, n) } : {}),
  };
}

export type RoundStatus = 'lost' | 'idle' | 'done' | 'more';

/**
 * Analyses the next batch of a unit's rings after its watermark, in one transaction.
 * 'lost': this worker no longer holds the unit; 'idle': nothing new; 'more': a full batch was
 * analysed and more may follow; 'done': the backlog is analysed.
 */
export async function analyseNextBatch(pc: PipelineContext, unitId: string): Promise<{ status: RoundStatus; rings: number }> {
  return (await analyseGroup(pc, [unitId])).get(unitId) as { status: RoundStatus; rings: number };
}

/**
 * analyseNextBatch for several units in one transaction (many units with a few new rings each,
 * as in live operation, cost one round of statements instead of one each). Each unit gets at
 * most max(500, batchRings / units) rings. Per unit, the start analysis and the alert rules run
 * on its batch inside the same transaction.
 */
/** Units of the worker's memory whose held rollups are due to be written (all with `all`). */
export function rollupsDue(pc: PipelineContext, all = false, now = Date.now()): string[] {
  const out: string[] = [];
  for (const [id, m] of pc.memory) if (m.rollups && (all || now - m.rollupsSince >= ROLLUP_HOLD_MS)) out.push(id);
  return out;
}

export async function analyseGroup(
  pc: PipelineContext,
  unitIds: string[],
  opts: { writeRollups?: ReadonlySet<string> } = {},
): Promise<Map<string, { status: RoundStatus; rings: number }>> {
  const results = new Map<string, { status: RoundStatus; rings: number }>();
  const batch = pc.config.worker.batchRings;
  const perUnit = Math.max(Math.min(500, batch), Math.floor(batch / Math.max(1, unitIds.length)));
  const ids = [...new Set(unitIds)].sort();
  const newWatermarks = new Map<string, number>();
  let announced: string[] = [];
  try {
    await withTransaction(pc.pool, async (client) => {
      const t0 = performance.now();
      const progress = await lockUnits(client, ids, pc.workerId, pc.config.worker.leaseS);
      for (const id of ids) if (!progress.has(id)) results.set(id, { status: 'lost', rings: 0 });
      const held = ids.filter((id) => progress.has(id));
      if (held.length === 0) return;
      const inputs = new Map<string, AnalyserInputs>();
      for (const id of held) {
        const mem = memoryOf(pc, id);
        let p = progress.get(id) as UnitProgress;
        if (p.reanalyseFromMs !== null) {
          // A baseline or configuration version took effect before the watermark: go back and judge the rings again from then on.
          const r = await rewindTo(client, id, p.reanalyseFromMs);
          p = { ...p, watermarkMs: r.watermarkMs, rollupsToMs: r.watermarkMs ?? -Infinity, reanalyseFromMs: null, reanalysisToMs: Math.max(p.reanalysisToMs ?? -Infinity, p.watermarkMs ?? -Infinity) };
          progress.set(id, p);
          mem.analyser = null;
          mem.rollups = null;
          mem.inputsLoadedAt = 0;
          // The first steady ring may lie before the point now (history that arrived late): looked for again.
          mem.autoFitDueMs = null;
          mem.autoFitFromMs = null;
          mem.autoFitDueReached = false;
          mem.periodFit = null;
          pc.logger.info(
            { unitId: id, from: Number.isFinite(r.pointMs) ? new Date(r.pointMs).toISOString() : 'first ring', to: new Date(p.reanalysisToMs as number).toISOString(), alertsRemoved: r.removedAlerts, alertsSetAside: r.setAsideAlerts },
            'rings to be judged again',
          );
        }
        inputs.set(id, (await loadInputs(pc, client, id, mem, p.watermarkMs ?? -Infinity)).inputs);
        if (!mem.analyser || mem.watermarkMs !== p.watermarkMs) {
          mem.analyser = null;
          mem.rollups = null;
          // Rollups held by a worker that stopped without writing them (or by this one before a
          // rollback or a late-ring re-analysis): recompute those hours from stored analysis.
          if (p.watermarkMs !== null && p.rollupsToMs < p.watermarkMs) {
            const from = await firstAnalysisAfter(client, id, p.rollupsToMs);
            if (from !== null && from <= p.watermarkMs) await recomputeRollups(client, id, from, p.watermarkMs);
            await setRollupsTo(client, [{ unitId: id, toMs: p.watermarkMs }]);
          }
          mem.analyser = await primedAnalyser(client, id, inputs.get(id) as AnalyserInputs, p.watermarkMs);
          mem.watermarkMs = p.watermarkMs;
        }
      }
      const t1 = performance.now();
      const ringsByUnit = await readRingsAfterMany(
        client,
        held.map((id) => ({ unitId: id, afterMs: (progress.get(id) as UnitProgress).watermarkMs })),
        perUnit,
      );
      const t2 = performance.now();
      const enc = new AnalysisEncoder();
      const accs = new Map<string, RollupAccumulator>();
      const observationsByUnit = new Map<string, BatchObservation[]>();
      const logged: { unitId: string; fromMs: number; toMs: number; rings: number; rollupsToMs: number | null; rerun: boolean; history: boolean }[] = [];
      const reanalysing: string[] = [];
      const caughtUp: string[] = [];
      const learntOffsets: Array<LearntOffset & { unitId: string }> = [];
      const flushed: { unitId: string; toMs: number }[] = [];
      const now = Date.now();
      let total = 0;
      for (const id of held) {
        const rings = ringsByUnit.get(id);
        if (!rings || rings.count === 0) {
          results.set(id, { status: 'idle', rings: 0 });
          // Nothing new, but held rollups asked for: write them.
          const mem = memoryOf(pc, id);
          const p = progress.get(id) as UnitProgress;
          if (mem.rollups && opts.writeRollups?.has(id) && p.watermarkMs !== null) {
            accs.set(id, mem.rollups);
            flushed.push({ unitId: id, toMs: p.watermarkMs });
            mem.rollups = null;
          }
          continue;
        }
        const mem = memoryOf(pc, id);
        const p = progress.get(id) as UnitProgress;
        // One timeline in ring time: a batch holds one UTC day of a unit's rings.
        // - With a baseline: when analysis enters a new day, the days before it are complete, so
        //   their aggregates and the drift state are brought up to date first (what the nightly
        //   job does for the wall-clock day), and the day's rings are judged with them.
        // - Without one: the batch stops before the ring time at which the first baseline falls
        //   due, so the fit comes at that ring time (index.ts) and later rings are judged with it.
        // So a history analysed in one go meets each day as the same rings sent live would.
        const firstDay = Math.floor(rings.tsMs[0] / DAY_MS);
        let n = ringsOfDay(rings, firstDay);
        const newDay = p.watermarkMs !== null && firstDay > Math.floor(p.watermarkMs / DAY_MS);
        // The alert rules' state as the day begins: where a re-analysis from this day starts.
        if (newDay) await takeAlertMark(client, id, firstDay * DAY_MS);
        let inForce = await loadInputs(pc, client, id, mem, rings.tsMs[0]);
        if (inForce.inputs.baseline && newDay) {
          await runDriftForUnit(client, pc.config, id, rings.tsMs[0]);
          mem.inputsLoadedAt = 0;
          inForce = await loadInputs(pc, client, id, mem, rings.tsMs[0]);
        }
        inputs.set(id, inForce.inputs);
        // A batch never straddles the ring time at which another baseline takes over…
        n = countBefore(rings, n, inForce.untilMs);
        const due = mem.autoFitDueMs;
        if (!inForce.inputs.baseline && due !== null && rings.tsMs[0] < due) {
          // …nor, without one, the time at which the first falls due.
          const k = countBefore(rings, n, due);
          if (k < n) {
            n = k;
            mem.autoFitDueReached = true;
          }
        }
        // A batch starts and stays within one baseline period (work on the machine starts a new
        // one), and, on a baseline from before the work, stops at the ring time the new one falls
        // due, so the fit comes there (index.ts) and later rings are judged with it.
        const periods = inForce.inputs.periods ?? [];
        if (periods.length) {
          let next = Infinity;
          for (const e of periods) if (e.atMs > rings.tsMs[0] && e.atMs < next) next = e.atMs;
          n = countBefore(rings, n, next);
          const b = inForce.inputs.baseline;
          const period = b ? baselinePeriodAt(periods, rings.tsMs[0]) : null;
          const standing = b && period ? baselineStanding(period, Date.parse(b.window.from), pc.config.worker.baselineAutoDays) : null;
          if (period && standing && standing.state === 'superseded') {
            if (!mem.periodFit || mem.periodFit.fromMs !== period.fromMs) mem.periodFit = { fromMs: period.fromMs, dueMs: standing.fitDueMs as number, reached: false };
            if (rings.tsMs[0] < mem.periodFit.dueMs) {
              const k = countBefore(rings, n, mem.periodFit.dueMs);
              if (k < n) {
                n = k;
                mem.periodFit.reached = true;
              }
            }
          } else mem.periodFit = null;
        }
        // Rings judged again (up to where the re-analysis began) go in batches of their own.
        const rerun = p.reanalysisToMs !== null && rings.tsMs[0] <= p.reanalysisToMs;
        if (rerun) n = countBefore(rings, n, (p.reanalysisToMs as number) + 0.001);
        if (p.reanalysisToMs !== null) reanalysing.push(id);
        const truncated = n < rings.count;
        const dayRings = truncated ? sliceRings(rings, n) : rings;
        ringsByUnit.set(id, dayRings);
        const analyser = mem.analyser as UnitAnalyser;
        // From here the analyser's memory (and the held rollups) run ahead of the database until COMMIT.
        mem.watermarkMs = NaN;
        const acc = mem.rollups ?? new RollupAccumulator();
        const since = mem.rollups ? mem.rollupsSince : now;
        mem.rollups = null;
        const observations: BatchObservation[] = [];
        for (let j = 0; j < dayRings.count; j++) {
          const r = analyser.analyse(dayRings, j);
          enc.add(r.row, id);
          acc.add(r.row);
          if (r.raise && r.hold) observations.push({ ts: new Date(dayRings.tsMs[j]), raise: r.raise, hold: r.hold });
          if (r.learnt) for (const l of r.learnt) learntOffsets.push({ unitId: id, ...l });
        }
        observationsByUnit.set(id, observations);
        const first = dayRings.tsMs[0];
        const last = dayRings.tsMs[dayRings.count - 1];
        const hold =
          pc.holdRollups === true &&
          !opts.writeRollups?.has(id) &&
          dayRings.count <= HOLD_MAX_RINGS &&
          now - last <= HOLD_MAX_AGE_MS &&
          now - since < ROLLUP_HOLD_MS &&
          acc.hourBuckets().length === 1;
        if (hold) {
          mem.rollups = acc;
          mem.rollupsSince = since;
        } else accs.set(id, acc);
        // Rings judged again that had no analysis yet (they arrived out of order) are counted as late rings analysed.
        if (rerun) {
          const fresh = await countUnanalysed(client, id, first, last);
          if (fresh > 0) await advanceProgress(client, id, null, 0, fresh);
        }
        const more = truncated || dayRings.count >= perUnit;
        // History: rings judged again, a backlog with more to come, or rings long past their time.
        const history = rerun || more || now - last > pc.alertSettings.historyAgeS * 1000;
        logged.push({ unitId: id, fromMs: first, toMs: last, rings: dayRings.count, rollupsToMs: hold ? null : last, rerun, history });
        if (history) mem.historySinceAnnounced = true;
        // The backlog is analysed: alerts found in history are announced (those still active).
        if (!more) caughtUp.push(id);
        newWatermarks.set(id, last);
        results.set(id, { status: more ? 'more' : 'done', rings: dayRings.count });
        total += dayRings.count;
      }
      if (total === 0) {
        if (accs.size) {
          await writeRollupsOf(client, accs);
          await setRollupsTo(client, flushed);
        }
        return;
      }
      const t3 = performance.now();
      await writeAnalysis(client, pc.pool, enc);
      // Offsets of replaced probes learnt in this batch, committed with the rings that taught them.
      for (const l of learntOffsets) await recordLearntOffset(client, l.unitId, l.eventId, l.thermocouple, l.offsetC);
      const t4 = performance.now();
      if (accs.size) await writeRollupsOf(client, accs);
      await setRollupsTo(client, flushed);
      await recordInOrderBatches(client, pc.workerId ?? NO_CLAIM, logged);
      const t5 = performance.now();
      // Start analysis of every unit at once (one read and one write of the detector states),
      // then each unit's alert rules, which see the start findings merged into its observations.
      // Rings judged again are fed to it again from the detector state the rewind put back (their
      // starts were removed), so the starts of history that arrived after later rings are found.
      await recordStartsForGroup(
        client,
        logged.map(({ unitId: id }) => ({ unitId: id, rings: ringsByUnit.get(id) as RingColumns, versions: (inputs.get(id) as AnalyserInputs).versions, observations: observationsByUnit.get(id) as BatchObservation[] })),
      );
      for (const { unitId: id, rerun, history } of logged) {
        const observations = observationsByUnit.get(id) as BatchObservation[];
        if (observations.length) {
          const after = { idle: false };
          await applyAlertObservations(client, id, observations, pc.alertSettings, after, { history, rerun, leaveKinds: rerun ? KINDS_NOT_REANALYSED : undefined });
          // Only for the rings that follow; a rollback drops the analyser, and a new one starts not idle.
          const analyser = memoryOf(pc, id).analyser;
          if (analyser) analyser.alertsIdle = after.idle;
        }
      }
      await finishReanalysisReached(client, reanalysing);
      // Alerts found in the history just caught up with: announced once, if still active.
      announced = caughtUp.filter((id) => memoryOf(pc, id).historySinceAnnounced);
      await announceHistoricAlerts(client, announced);
      const t6 = performance.now();
      pc.logger.debug(
        { units: logged.length, rings: total, lockMs: r0(t1 - t0), readMs: r0(t2 - t1), analyseMs: r0(t3 - t2), writeMs: r0(t4 - t3), rollupMs: r0(t5 - t4), alertMs: r0(t6 - t5) },
        'batch analysed',
      );
    });
  } catch (err) {
    // The transaction rolled back: the memory may be ahead of what is stored.
    for (const id of ids) {
      const mem = pc.memory.get(id);
      if (mem) {
        mem.analyser = null;
        mem.rollups = null;
      }
    }
    throw err;
  }
  for (const [id, wm] of newWatermarks) memoryOf(pc, id).watermarkMs = wm;
  for (const id of announced) memoryOf(pc, id).historySinceAnnounced = false;
  for (const [id, r] of results) if (r.status === 'lost') pc.memory.delete(id);
  return results;
}

const ROLLUP_METRIC_NAMES: readonly string[] = Object.keys(ROLLUP_METRICS);

const rollupKey = (unitId: string, r: { period: string; metric: string; bucketMs: number }) => `${unitId}|${r.period}|${r.metric}|${r.bucketMs}`;

/**
 * Merges each unit's batch rollups into the stored rows of the hours and days they touch:
 * rows already stored are replaced (one upsert), new rows are inserted with one binary COPY.
 */
async function writeRollupsOf(client: Parameters<typeof lockOwnedUnit>[0], accs: Map<string, RollupAccumulator>): Promise<void> {
  const keys: { unitId: string; period: 'hour' | 'day'; bucketMs: number }[] = [];
  for (const [id, acc] of accs) {
    for (const b of acc.hourBuckets()) keys.push({ unitId: id, period: 'hour', bucketMs: b });
    for (const b of acc.dayBuckets()) keys.push({ unitId: id, period: 'day', bucketMs: b });
  }
  // Only the accumulator's metrics can merge with its rows (rows of any other metric are left as they are).
  const stored = await readRollupBucketsMany(client, keys, ROLLUP_METRIC_NAMES);
  const byUnit = new Map<string, RollupRow[]>();
  const exists = new Set<string>();
  for (const { unitId, row } of stored) {
    let list = byUnit.get(unitId);
    if (!list) byUnit.set(unitId, (list = []));
    list.push(row);
    exists.add(rollupKey(unitId, row));
  }
  const fresh: { unitId: string; row: RollupRow }[] = [];
  const replaced: { unitId: string; row: RollupRow }[] = [];
  for (const [id, acc] of accs) {
    for (const row of acc.mergedWith(byUnit.get(id) ?? [])) (exists.has(rollupKey(id, row)) ? replaced : fresh).push({ unitId: id, row });
  }
  await writeRollupsMany(client, replaced);
  await insertRollupsMany(client, fresh);
}

/** Groups ring times into spans: a gap longer than gapMs starts a new span. */
export function spansOf(timesMs: number[], gapMs = HOUR_MS): Array<[number, number]> {
  const t = [...timesMs].sort((a, b) => a - b);
  const out: Array<[number, number]> = [];
  for (const x of t) {
    const cur = out[out.length - 1];
    if (cur && x - cur[1] <= gapMs) cur[1] = x;
    else out.push([x, x]);
  }
  return out;
}

/**
 * Re-analyses a unit's rings in [fromMs, toMs] (extended by the reach of the analyser's memory,
 * since a ring changes the steady test and window tests of those after it, but never past the
 * watermark), with the
 * memory of the rings before fromMs; then recomputes every hour and day the span touches from
 * stored analysis. Idempotent: running it twice gives the same rows. Rings that had no
 * analysis before are added to the late counter. Returns the rings analysed, or
 * null when this worker does not hold the unit.
 */
export async function reanalyseSpan(pc: PipelineContext, unitId: string, fromMs: number, toMs: number, kind: 'late' | 'rerun'): Promise<number | null> {
  const mem = memoryOf(pc, unitId);
  const n = await withTransaction(pc.pool, async (client) => {
    const progress = await lockUnit(pc, client, unitId);
    if (!progress) return null;
    if (progress.watermarkMs === null || fromMs > progress.watermarkMs) return 0;
    const w = pc.config.worker;
    const reachMs = Math.max(w.steadyWindowS * 1000, (w.windowTestMinutes + w.windowTestEveryMinutes) * 60_000);
    const end = Math.min(progress.watermarkMs, toMs + reachMs);
    let inForce = await loadInputs(pc, client, unitId, mem, fromMs);
    const before = fromMs - 0.001;
    const analyser = await primedAnalyser(client, unitId, inForce.inputs, before);
    const rings = await readRingsBetween(client, unitId, fromMs, end, 10_000_000);
    if (rings.count === 0) return 0;
    const newRings = await countUnanalysed(client, unitId, fromMs, end);
    const enc = new AnalysisEncoder(unitId);
    for (let j = 0; j < rings.count; j++) {
      // Each ring judged with the baseline in force at its time.
      if (rings.tsMs[j] >= inForce.untilMs) {
        inForce = await loadInputs(pc, client, unitId, mem, rings.tsMs[j]);
        analyser.setInputs(inForce.inputs);
      }
      enc.add(analyser.analyse(rings, j).row);
    }
    await writeAnalysis(client, pc.pool, enc);
    await recomputeRollups(client, unitId, rings.tsMs[0], rings.tsMs[rings.count - 1]);
    await advanceProgress(client, unitId, null, 0, newRings);
    await logBatch(client, { unitId, workerId: pc.workerId ?? NO_CLAIM, kind, fromMs: rings.tsMs[0], toMs: rings.tsMs[rings.count - 1], rings: rings.count });
    return rings.count;
  });
  // The in-order memory may cover rings just re-analysed: rebuild it next round (the held
  // rollups with it: the hours after rollups_to are recomputed then).
  mem.analyser = null;
  mem.rollups = null;
  if (n === null) pc.memory.delete(unitId);
  return n;
}

/** Recomputes the hourly rollups of every hour in [fromMs, toMs] from stored analysis, then their days from the hours. */
export async function recomputeRollups(client: Parameters<typeof lockOwnedUnit>[0], unitId: string, fromMs: number, toMs: number): Promise<void> {
  const h0 = bucketOf('hour', fromMs);
  const h1 = bucketOf('hour', toMs) + HOUR_MS;
  const hours = new RollupAccumulator();
  const stored = await readAnalysis(client, unitId, h0, h1);
  for (let i = 0; i < stored.count; i++) hours.addStored(stored, i);
  const hourBuckets: number[] = [];
  for (let h = h0; h < h1; h += HOUR_MS) hourBuckets.push(h);
  await deleteRollupBuckets(client, unitId, 'hour', hourBuckets);
  await insertRollupsMany(client, hours.hourRows().map((row) => ({ unitId, row })));
  const d0 = bucketOf('day', fromMs);
  const d1 = bucketOf('day', toMs) + DAY_MS;
  const days = daysFromHours(await readRollups(client, unitId, 'hour', d0, d1));
  const dayBuckets: number[] = [];
  for (let d = d0; d < d1; d += DAY_MS) dayBuckets.push(d);
  await deleteRollupBuckets(client, unitId, 'day', dayBuckets);
  await insertRollupsMany(client, days.map((row) => ({ unitId, row })));
}
