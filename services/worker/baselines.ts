/**
 * Fitting baselines: the requests people make over a window they choose (POST
 * /v1/units/:unitId/baselines records one), once analysis has passed the window, and
 * automatically once a unit without a baseline has `baselineAutoDays` of steady data (the
 * window is the first that many days from its first steady ring). Only steady rings enter;
 * load bins with fewer than `baselineMinBinCount` rings are "no baseline here". Each fit is a
 * new version; nothing already analysed is changed.
 */
import { baselineOptionsFor, baselineWindowProblem, type BaselineSample } from '../core/baseline.ts';
import { fitModalBaseline } from '../core/modes.ts';
import type { WorkerConfig } from '../db/config.ts';
import { countSteady, readBaselineSamples } from '../db/analysis.ts';
import { baselineInForce, dueBaselineRequests, finishBaselineRequest, insertBaseline, type BaselineRecord } from '../db/baselines.ts';
import type { Logger } from '../db/logger.ts';
import { withTransaction, type Pool } from '../db/pool.ts';

/** Most steady rings read for one fit; beyond it an even sample of them is taken. */
export const MAX_FIT_SAMPLES = 200_000;

export class BaselineFitError extends Error {}

/**
 * Fits and stores a new baseline version from the steady rings in [fromMs, toMs). Throws a
 * BaselineFitError naming the problem when no load bin holds enough steady rings.
 */
export async function fitBaseline(
  pool: Pool,
  unitId: string,
  fromMs: number,
  toMs: number,
  by: string,
  settings: WorkerConfig,
  opts: { nowMs?: number; requestId?: string } = {},
): Promise<BaselineRecord | null> {
  const nowMs = opts.nowMs ?? Date.now();
  const options = baselineOptionsFor(settings);
  const total = await countSteady(pool, unitId, fromMs, toMs);
  if (total === 0) throw new BaselineFitError(baselineWindowProblem(unitId, fromMs, toMs, { steadyRings: 0, fullestBin: 0 }, options.minCount) as string);
  const sampleEvery = Math.ceil(total / MAX_FIT_SAMPLES);
  const client = await pool.connect();
  let samples: (BaselineSample & { mode: string | null })[];
  try {
    const c = await readBaselineSamples(client, unitId, fromMs, toMs, sampleEvery);
    samples = [];
    for (let i = 0; i < c.count; i++) {
      samples.push({
        loadFraction: c.loadFraction[i],
        ringMeanDegC: c.ringMean[i],
        spreadDegC: c.spread[i],
        thermocoupleDeviationDegC: c.tcDeviation[i],
        chamberDeviationDegC: c.chamberDeviation[i],
        mode: c.mode[i],
      });
    }
  } finally {
    client.release();
  }
  const window = { from: new Date(fromMs).toISOString(), to: new Date(toMs).toISOString() };
  // The unit's baseline over every mode, with one per combustion mode that has enough steady rings.
  const probe = fitModalBaseline(samples, { version: 0, window, fittedAt: new Date(nowMs).toISOString(), fittedBy: by }, options);
  const fullestBin = Math.max(0, ...probe.spread.bins.map((b) => b.count));
  const problem = baselineWindowProblem(unitId, fromMs, toMs, { steadyRings: total, fullestBin }, options.minCount);
  if (problem) throw new BaselineFitError(problem);
  return withTransaction(pool, (c) => insertBaseline(c, unitId, (version) => ({ ...probe, version }), opts.requestId));
}

/**
 * The automatic first fit over [fromMs, toMs) (from the unit's first steady ring, at least
 * baselineAutoDays long), in force from toMs. Null when a baseline is already in force at toMs
 * or no load bin holds enough steady rings yet. (A unit whose earlier history arrived after its
 * first fit has none in force at the ring time its first fit falls due now: it gets one there.)
 */
export async function fitFirstBaseline(pool: Pool, unitId: string, fromMs: number, toMs: number, settings: WorkerConfig): Promise<BaselineRecord | null> {
  if (await baselineInForce(pool, unitId, toMs)) return null;
  try {
    return await fitBaseline(pool, unitId, fromMs, toMs, 'automatic', settings);
  } catch (err) {
    if (err instanceof BaselineFitError) return null;
    throw err;
  }
}

/**
 * The automatic fit of a baseline period started by maintenance: over [fromMs, toMs) (from the
 * work to baselineAutoDays later), in force from toMs. 'present' when the baseline in force at
 * toMs was already learnt within the period (a fit requested by a person, or made before); null
 * when no load bin holds enough steady rings yet.
 */
export async function fitPeriodBaseline(pool: Pool, unitId: string, fromMs: number, toMs: number, settings: WorkerConfig): Promise<BaselineRecord | 'present' | null> {
  const b = await baselineInForce(pool, unitId, toMs);
  if (b && b.windowFrom.getTime() >= fromMs) return 'present';
  try {
    return await fitBaseline(pool, unitId, fromMs, toMs, 'automatic', settings);
  } catch (err) {
    if (err instanceof BaselineFitError) return null;
    throw err;
  }
}

/**
 * Fits the pending requests of these units whose window analysis has passed. Returns the
 * units that got a new version.
 */
export async function fitDueRequests(pool: Pool, logger: Logger, unitIds: string[], settings: WorkerConfig): Promise<string[]> {
  const done: string[] = [];
  for (const r of await dueBaselineRequests(pool, unitIds)) {
    try {
      const b = await fitBaseline(pool, r.unitId, r.windowFrom.getTime(), r.windowTo.getTime(), r.requestedBy, settings, { requestId: r.id });
      if (!b) continue;
      done.push(r.unitId);
      logger.info({ unitId: r.unitId, requestId: r.id, baselineVersion: b.version }, 'requested baseline fitted');
    } catch (err) {
      if (!(err instanceof BaselineFitError)) throw err;
      await finishBaselineRequest(pool, r.id, { error: err.message });
      logger.warn({ unitId: r.unitId, requestId: r.id, reason: err.message }, 'requested baseline could not be fitted');
    }
  }
  return done;
}
