/**
 * Nightly drift per chamber and thermocouple, against the unit's baseline in force:
 * 1. daily robust aggregates (median, MAD) of residuals on steady rings, computed in the
 *    database for each complete day not yet aggregated;
 * 2. per day, the common mode (median over all chambers, resp. all thermocouples) removed, so a
 *    shift every chamber shares (ambient, compressor, an old baseline) blames none of them;
 * 3. the scale σ of each series from its first `driftReferenceDays` days (floored), then a
 *    two-sided CUSUM and an EWMA on the standardised values that follow;
 * 4. the drift rate over the last `driftLookbackDays` by regression on time (°C per 30 days) and
 *    on cumulative fired hours (°C per 1000 fired hours), with its Newey–West confidence interval
 *    (daily residuals are autocorrelated), significant only over at least `driftMinSpanDays`.
 * The state is recomputed from the stored daily aggregates each run, so a run repeated gives
 * the same state; it names the baseline version it was computed against.
 */
import { periodEvents, probeReplacements } from '../db/events.ts';
import { chambersReached } from '../core/baseline-periods.ts';
import { createCusum, createEwma, driftRate, removeCommonMode, robustSigma, updateCusum, updateEwma } from '../core/drift.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import type { Pool } from '../db/pool.ts';
import type { Queryable } from '../db/alert-rows.ts';
import { baselineInForce } from '../db/baselines.ts';
import { lockUnits } from '../db/progress.ts';
import { computeDailyResiduals, readDailyResiduals, readDriftStates, writeDriftStates, type DriftStateRecord, type DriftSubject } from '../db/drift.ts';

const DAY_MS = 86_400_000;
const dayText = (ms: number) => new Date(Math.floor(ms / DAY_MS) * DAY_MS).toISOString().slice(0, 10);
const dayMs = (d: string) => Date.parse(d + 'T00:00:00Z');

/** Fewest daily values a regression line needs to have an interval at all (n − 2 > 0). */
const MIN_RATE_POINTS = 3;

export interface DriftRunResult {
  unitId: string;
  baselineVersion: number | null;
  days: number;
  states: number;
}

/**
 * Runs the drift computation for one unit as of asOfMs (days before asOfMs's UTC day are
 * complete), on a pool or on the connection of a transaction in progress (the pipeline's, when
 * a unit's analysis enters a new ring-time day).
 */
export async function runDriftForUnit(pool: Pool | Queryable, config: Config, unitId: string, asOfMs = Date.now()): Promise<DriftRunResult> {
  const s = config.worker;
  // The baseline in force at the day reached: a history judged again meets each day as live did.
  const base = await baselineInForce(pool, unitId, asOfMs);
  if (!base) return { unitId, baselineVersion: null, days: 0, states: 0 };
  const version = base.version;
  const previous = (await readDriftStates(pool, unitId)).filter((x) => x.baselineVersion === version);
  const firstDay = dayText(Math.min(base.fittedAt.getTime(), base.windowTo.getTime(), asOfMs));
  const lastDone = previous.length ? previous.map((x) => x.lastDay).sort()[0] : null;
  // Re-aggregate the last aggregated day too: it may have been aggregated while late rings were still arriving.
  const fromDay = lastDone && lastDone > firstDay ? lastDone : firstDay;
  const toDay = dayText(asOfMs);
  if (fromDay < toDay) await computeDailyResiduals(pool, unitId, fromDay, toDay, version);
  const daily = await readDailyResiduals(pool, unitId, version, firstDay, toDay);
  const days = [...new Set(daily.map((d) => d.day))].sort();
  const states: DriftStateRecord[] = [];
  // A replaced thermocouple's drift restarts: only the days after its latest replacement count
  // (the day of the work holds both probes).
  const restartAfterDay = new Map<number, string>();
  for (const r of await probeReplacements(pool, unitId)) restartAfterDay.set(r.thermocouple, dayText(r.atMs));
  // Work that starts a new baseline period (fuel nozzles, an inspection, tuning) after this
  // baseline's window began: the drift of the chambers concerned and their neighbours (all, for
  // the whole unit) restarts after the day of the work, and so does every thermocouple's (their plumes reach
  // them), until the period's own baseline is fitted.
  const latest = (a: string | null | undefined, b: string | null | undefined): string | undefined => (a && b ? (a > b ? a : b) : (a ?? b ?? undefined));
  const chamberRestartAfterDay = new Map<number, string>();
  const chamberCount = base.baseline.chambers.length;
  let allChambersAfter: string | undefined;
  let thermocouplesAfter: string | undefined;
  for (const e of await periodEvents(pool, unitId)) {
    if (e.atMs <= base.windowFrom.getTime() || e.atMs > asOfMs) continue;
    const d = dayText(e.atMs);
    if (e.chambers === null) allChambersAfter = latest(allChambersAfter, d);
    else for (const k of chambersReached(e.chambers, chamberCount)) chamberRestartAfterDay.set(k - 1, latest(chamberRestartAfterDay.get(k - 1), d) as string);
    thermocouplesAfter = latest(thermocouplesAfter, d);
  }
  for (const subject of ['chamber', 'thermocouple'] as DriftSubject[]) {
    const rows = daily.filter((d) => d.subject === subject);
    if (rows.length === 0) continue;
    const width = Math.max(...rows.map((r) => r.idx));
    // Matrix day × subject of medians, and the fired hours of each day.
    const medians = days.map(() => new Array<number | null>(width).fill(null));
    const fired = new Map<string, number>();
    const dayIndex = new Map(days.map((d, i) => [d, i]));
    for (const r of rows) {
      medians[dayIndex.get(r.day) as number][r.idx - 1] = r.median;
      fired.set(r.day, r.firedHours);
    }
    const cm = medians.map((m) => removeCommonMode(m).residualsDegC);
    let cumulative = 0;
    const firedAt = days.map((d) => (cumulative += fired.get(d) ?? 0));
    for (let i = 0; i < width; i++) {
      const series: { day: string; t: number; v: number; fired: number }[] = [];
      for (let j = 0; j < days.length; j++) {
        const v = cm[j][i];
        if (Number.isFinite(v)) series.push({ day: days[j], t: dayMs(days[j]) / 1000, v, fired: firedAt[j] });
      }
      const after = subject === 'thermocouple' ? latest(restartAfterDay.get(i), thermocouplesAfter) : latest(chamberRestartAfterDay.get(i), allChambersAfter);
      if (after !== undefined) series.splice(0, series.length, ...series.filter((p) => p.day > after));
      if (series.length === 0) continue;
      const ref = series.slice(0, s.driftReferenceDays);
      const sigma = Math.max(s.driftSigmaFloorDegC, ref.length >= 2 ? robustSigma(ref.map((p) => p.v)) || 0 : 0);
      const cusum = createCusum();
      const ewma = createEwma();
      if (series.length > s.driftReferenceDays) {
        for (const p of series.slice(s.driftReferenceDays)) {
          updateCusum(cusum, p.v / sigma);
          updateEwma(ewma, p.v / sigma);
        }
      }
      const recent = series.filter((p) => p.t * 1000 >= dayMs(toDay) - s.driftLookbackDays * DAY_MS);
      const firedSpan = recent.length ? recent[recent.length - 1].fired - recent[0].fired : 0;
      const rate =
        recent.length >= MIN_RATE_POINTS
          ? driftRate(
              recent.map((p) => p.t),
              recent.map((p) => p.v),
              firedSpan > 0 ? recent.map((p) => p.fired) : undefined,
              { minSpanDays: s.driftMinSpanDays },
            )
          : null;
      states.push({
        subject,
        idx: i + 1,
        baselineVersion: version,
        lastDay: series[series.length - 1].day,
        sigma,
        days: series.length,
        rate,
        cusum,
        ewma,
        lastValue: series[series.length - 1].v,
      });
    }
  }
  await writeDriftStates(pool, unitId, states);
  return { unitId, baselineVersion: version, days: days.length, states: states.length };
}

/** The nightly job over a set of units; a failure on one unit is logged and the others go on. */
export async function runDrift(deps: { pool: Pool; logger: Logger; config: Config }, unitIds: string[], asOfMs = Date.now()): Promise<DriftRunResult[]> {
  const out: DriftRunResult[] = [];
  for (const unitId of unitIds) {
    try {
      const r = await runDriftForUnit(deps.pool, deps.config, unitId, asOfMs);
      out.push(r);
      if (r.baselineVersion !== null) deps.logger.info({ unitId, baselineVersion: r.baselineVersion, days: r.days, states: r.states }, 'drift updated');
    } catch (err) {
      deps.logger.error({ unitId, err: (err as Error).message }, 'drift computation failed');
    }
  }
  return out;
}

/**
 * The nightly safety net: drift for the units whose last ring-time day has ended on the wall
 * clock but was never ended by a later ring (data that stopped mid-day). Each unit is brought up
 * to the end of its own last ring day (ring time, never the wall clock's day: a history months
 * old is judged as of its own days), inside a transaction that holds the unit's progress row, so
 * it never runs beside the unit's analysis; a unit whose rings are being judged again, or whose
 * last day is still under way, is left to the analysis, which brings drift up to date as each
 * ring-time day ends.
 */
export async function runNightlyDrift(deps: { pool: Pool; logger: Logger; config: Config }, unitIds: string[], nowMs: number): Promise<DriftRunResult[]> {
  const out: DriftRunResult[] = [];
  for (const unitId of unitIds) {
    const client = await deps.pool.connect();
    try {
      await client.query('BEGIN');
      const p = (await lockUnits(client, [unitId], null)).get(unitId);
      const endOfLastDay = p?.watermarkMs == null ? null : (Math.floor(p.watermarkMs / DAY_MS) + 1) * DAY_MS;
      if (p && endOfLastDay !== null && endOfLastDay <= nowMs && p.reanalyseFromMs === null && p.reanalysisToMs === null) {
        const r = await runDriftForUnit(client, deps.config, unitId, endOfLastDay);
        out.push(r);
        if (r.baselineVersion !== null) deps.logger.info({ unitId, baselineVersion: r.baselineVersion, days: r.days, states: r.states, asOf: new Date(endOfLastDay).toISOString() }, 'drift updated (nightly)');
      }
      await client.query('COMMIT');
    } catch (err) {
      await client.query('ROLLBACK').catch(() => undefined);
      deps.logger.error({ unitId, err: (err as Error).message }, 'drift computation failed');
    } finally {
      client.release();
    }
  }
  return out;
}
