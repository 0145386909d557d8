/**
 * The analysis pipeline of one unit. A round is one transaction: check the lease (and lock the
 * claim row), read the next rings after the watermark (binary COPY), analyse them in time
 * order, write their analysis (delete + COPY of the span), merge their rollups, advance the
 * watermark, log the batch and hand the alert observations to the alert rules, then COMMIT:
 * all of it or none, so a crash never loses or repeats a ring. Late rings (at or before the
 * watermark, without analysis) are analysed by re-running their span with the memory of the
 * rings before it, and the hours and days they touch are recomputed from stored analysis.
 */
import type { Thresholds } from '../core/findings.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import { withTransaction, type Pool } from '../db/pool.ts';
import {
  advanceProgress,
  AnalysisEncoder,
  countUnanalysed,
  deleteRollupBuckets,
  lastSteadySpread,
  lockOwnedUnit,
  lockProgress,
  logBatch,
  readAnalysis,
  readLastAnalysis,
  readRingsAfterMany,
  readRollupBucketsMany,
  recordInOrderBatches,
  writeRollupsMany,
  insertRollupsMany,
  firstAnalysisAfter,
  setRollupsTo,
  lockUnits,
  type RingColumns,
  type RollupRow,
  readRingsBetween,
  readRollupBuckets,
  readRollups,
  writeAnalysis,
  writeRollups,
  type UnitProgress,
} from '../db/analysis.ts';
import { latestBaseline } from '../db/baselines.ts';
import { driftStateStamp, readDriftStates } from '../db/drift.ts';
import { unitVersions } from '../db/units.ts';
import type { Queryable } from '../db/alerts.ts';
import type { ChamberDriftInput } from '../core/findings.ts';
import { applyAlertObservations, type AlertSettings } from './alerts.ts';
import { recordStartsForBatch, type BatchObservation } from '../db/starts.ts';
import { bucketOf, DAY_MS, daysFromHours, HOUR_MS, RollupAccumulator, ROLLUP_METRICS } from './rollups.ts';
import { UnitAnalyser, type AnalyserInputs } from './unit-analyser.ts';

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
  baselineVersion: number | null;
  driftStamp: number | null;
  /** Wall time of the last look for the first steady ring (units without a baseline). */
  lastAutoFitCheck: number;
  /** When the first baseline is due (first steady ring + baselineAutoDays), once known. */
  autoFitDueMs: number | null;
  autoFitFromMs: number | null;
  /**
   * Rollups of in-order rings analysed and committed but not written yet: exactly the rings after
   * the stored rollups_to up to the watermark. Kept only together with the analyser's memory.
   */
  rollups: RollupAccumulator | null;
  /** Wall time the held rollups were started. */
  rollupsSince: number;
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
      (m = { analyser: null, watermarkMs: null, inputs: null, inputsLoadedAt: 0, baselineVersion: null, driftStamp: null, lastAutoFitCheck: 0, autoFitDueMs: null, autoFitFromMs: null, rollups: null, rollupsSince: 0 }),
    );
  return m;
}

/** Forgets the unit's inputs so the next round re-reads them (after a baseline fit or drift run). */
export function invalidateInputs(pc: PipelineContext, unitId: string): void {
  const m = pc.memory.get(unitId);
  if (m) m.inputsLoadedAt = 0;
}

/**
 * The unit's analysis inputs, re-read at most every INPUTS_TTL_MS, on the round's own
 * connection `q`: a round holds its transaction's connection, so taking more from the pool
 * would let rounds in flight wait for each other's connections (and the nightly drift's) until
 * the pool's wait times out.
 */
async function loadInputs(pc: PipelineContext, q: Queryable, unitId: string, mem: UnitMemory): Promise<AnalyserInputs> {
  const now = Date.now();
  if (mem.inputs && now - mem.inputsLoadedAt < INPUTS_TTL_MS) return mem.inputs;
  // Spread the re-reads of a fleet's units over time rather than all at once.
  const jitter = Math.floor(Math.random() * (INPUTS_TTL_MS / 3));
  const versions = await unitVersions(q, unitId);
  const baseline = await latestBaseline(q, unitId);
  const stamp = await driftStateStamp(q, unitId);
  if (versions.length === 0) throw new Error(`unit ${unitId} has no configuration`);
  let driftChambers: (ChamberDriftInput | null)[] = mem.inputs?.driftChambers ?? [];
  let driftThermocouples: (ChamberDriftInput | null)[] = mem.inputs?.driftThermocouples ?? [];
  if (stamp !== mem.driftStamp || (baseline?.version ?? null) !== mem.baselineVersion) {
    const states = baseline ? (await readDriftStates(q, unitId)).filter((s) => s.baselineVersion === baseline.version) : [];
    driftChambers = [];
    driftThermocouples = [];
    for (const s of states) (s.subject === 'chamber' ? driftChambers : driftThermocouples)[s.idx - 1] = { cusum: s.cusum, rate: s.rate };
    for (let k = 0; k < driftChambers.length; k++) driftChambers[k] ??= null;
    for (let i = 0; i < driftThermocouples.length; i++) driftThermocouples[i] ??= null;
  }
  const inputs: AnalyserInputs = {
    unitId,
    versions,
    baseline: baseline ? baseline.baseline : null,
    driftChambers,
    driftThermocouples,
    raise: pc.raise,
    hold: pc.hold,
    settings: pc.config.worker,
  };
  mem.inputs = inputs;
  mem.inputsLoadedAt = now - jitter;
  mem.baselineVersion = baseline?.version ?? null;
  mem.driftStamp = stamp;
  if (mem.analyser) mem.analyser.setInputs(inputs);
  return inputs;
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
        const p = progress.get(id) as UnitProgress;
        inputs.set(id, await loadInputs(pc, client, id, mem));
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
      const logged: { unitId: string; fromMs: number; toMs: number; rings: number; rollupsToMs: number | null }[] = [];
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
        const analyser = mem.analyser as UnitAnalyser;
        // From here the analyser's memory (and the held rollups) run ahead of the database until COMMIT.
        mem.watermarkMs = NaN;
        const acc = mem.rollups ?? new RollupAccumulator();
        const since = mem.rollups ? mem.rollupsSince : now;
        mem.rollups = null;
        const observations: BatchObservation[] = [];
        for (let j = 0; j < rings.count; j++) {
          const r = analyser.analyse(rings, j);
          enc.add(r.row, id);
          acc.add(r.row);
          if (r.raise && r.hold) observations.push({ ts: new Date(rings.tsMs[j]), raise: r.raise, hold: r.hold });
        }
        observationsByUnit.set(id, observations);
        const first = rings.tsMs[0];
        const last = rings.tsMs[rings.count - 1];
        const hold =
          pc.holdRollups === true &&
          !opts.writeRollups?.has(id) &&
          rings.count <= HOLD_MAX_RINGS &&
          now - last <= HOLD_MAX_AGE_MS &&
          now - since < ROLLUP_HOLD_MS &&
          acc.hourBuckets().length === 1;
        if (hold) {
          mem.rollups = acc;
          mem.rollupsSince = since;
        } else accs.set(id, acc);
        logged.push({ unitId: id, fromMs: first, toMs: last, rings: rings.count, rollupsToMs: hold ? null : last });
        newWatermarks.set(id, last);
        results.set(id, { status: rings.count >= perUnit ? 'more' : 'done', rings: rings.count });
        total += rings.count;
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
      const t4 = performance.now();
      if (accs.size) await writeRollupsOf(client, accs);
      await setRollupsTo(client, flushed);
      await recordInOrderBatches(client, pc.workerId ?? NO_CLAIM, logged);
      const t5 = performance.now();
      for (const { unitId: id } of logged) {
        const observations = observationsByUnit.get(id) as BatchObservation[];
        await recordStartsForBatch(client, id, ringsByUnit.get(id) as RingColumns, (inputs.get(id) as AnalyserInputs).versions, observations);
        if (observations.length) {
          const after = { idle: false };
          await applyAlertObservations(client, id, observations, pc.alertSettings, after);
          // Only for the rings that follow; a rollback drops the analyser, and a new one starts not idle.
          const analyser = memoryOf(pc, id).analyser;
          if (analyser) analyser.alertsIdle = after.idle;
        }
      }
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
    const inputs = await loadInputs(pc, client, unitId, mem);
    const before = fromMs - 0.001;
    const analyser = await primedAnalyser(client, unitId, inputs, before);
    const rings = await readRingsBetween(client, unitId, fromMs, end, 10_000_000);
    if (rings.count === 0) return 0;
    const newRings = await countUnanalysed(client, unitId, fromMs, end);
    const enc = new AnalysisEncoder(unitId);
    for (let j = 0; j < rings.count; j++) enc.add(analyser.analyse(rings, j).row);
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
