/**
 * What the read routes share: time windows with their bounds (a request for more history than
 * a resolution allows is refused with a sentence saying what is allowed), the unit lookup that
 * answers 404, schema pieces, the read repository bound to the application's pool, and the
 * commit snapshot that tells the cached routes whether anything was written since they read.
 */
import type { FastifyInstance } from 'fastify';
import { Type } from 'typebox';
import { judgement, type NotJudged } from '../../core/judgement.ts';
import { commitSnapshot, createReadsRepository, type ReadsRepository, type StoredAnalysis } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import { badRequest, notFound } from '../../http/errors.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { type JudgementSettings } from '../schemas.ts';

export const DAY_MS = 86_400_000;

/** Longest window per resolution, days. */
export const WINDOW_LIMIT_DAYS = { '1m': 7, '1h': 400, '1d': 3700 } as const;
export type Resolution = keyof typeof WINDOW_LIMIT_DAYS;

export const Window = {
  from: Type.Optional(Type.String({ format: 'date-time', description: 'start of the window (RFC 3339); default depends on the route' })),
  to: Type.Optional(Type.String({ format: 'date-time', description: 'end of the window (RFC 3339); default now' })),
};

export const readErrors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply };

export interface TimeWindow {
  fromMs: number;
  toMs: number;
}

/**
 * Reads from/to with a default span ending now; refuses an inverted window and one longer than
 * maxDays, naming the limit and the resolution that would serve it.
 */
export function timeWindow(q: { from?: string; to?: string }, nowMs: number, defaultDays: number, maxDays: number, what: string): TimeWindow {
  const toMs = q.to ? Date.parse(q.to) : nowMs;
  const fromMs = q.from ? Date.parse(q.from) : toMs - defaultDays * DAY_MS;
  if (!Number.isFinite(fromMs) || !Number.isFinite(toMs)) throw badRequest('from and to must be RFC 3339 times, e.g. 2026-03-01T00:00:00Z.');
  if (fromMs >= toMs) throw badRequest(`The window is empty or inverted: from (${new Date(fromMs).toISOString()}) must be before to (${new Date(toMs).toISOString()}).`);
  const days = (toMs - fromMs) / DAY_MS;
  if (days > maxDays + 1e-9) {
    throw badRequest(`${what} is limited to ${maxDays} days per request; this window is ${days.toFixed(1)} days. Ask for a shorter window or a coarser resolution.`, [
      { field: 'from', reason: `window longer than ${maxDays} days` },
    ]);
  }
  return { fromMs, toMs };
}

/** Where a read window's end came from: the request's `to`, the unit's last ring, or the clock (a `from` alone, or a unit with no ring). */
export type WindowEnd = 'request' | 'last-ring' | 'clock';

export interface ReadWindow extends TimeWindow {
  endsAt: WindowEnd;
}

/** The reply header that says which window a read used: `from=…; to=…; ends-at=request|last-ring|clock`. */
export const WINDOW_HEADER = 'x-cansight-window';

/**
 * A read window in ring time. Without from and to, the default span ends just after the unit's
 * last stored ring, so a unit whose rings ended months ago (a history import, a unit laid up)
 * shows its last days rather than an empty stretch of the wall clock. With `to` it ends there;
 * with `from` alone it runs to now. The reply says which window it used (WINDOW_HEADER).
 */
export async function readWindow(
  reads: ReadsRepository,
  unitId: string,
  q: { from?: string; to?: string },
  defaultDays: number,
  maxDays: number,
  what: string,
  reply?: { header(name: string, value: string): unknown },
): Promise<ReadWindow> {
  const nowMs = Date.now();
  let endsAt: WindowEnd = q.to ? 'request' : 'clock';
  let to = q.to;
  if (!q.to && !q.from) {
    const last = await reads.lastRingMs(unitId);
    if (last !== null) {
      to = new Date(last + 1000).toISOString();
      endsAt = 'last-ring';
    }
  }
  const w = timeWindow({ from: q.from, to }, nowMs, defaultDays, maxDays, what);
  reply?.header(WINDOW_HEADER, `from=${new Date(w.fromMs).toISOString()}; to=${new Date(w.toMs).toISOString()}; ends-at=${endsAt}`);
  return { ...w, endsAt };
}

/** The unit or 404. */
export async function unitOr404(app: FastifyInstance, unitId: string): Promise<UnitRecord> {
  const unit = await app.repos.units.get(unitId);
  if (!unit) throw notFound(`No unit ${unitId}.`);
  return unit;
}

const readsByPool = new WeakMap<object, ReadsRepository>();

/** The read repository of this application's pool (one per pool). */
export function readsOf(app: FastifyInstance): ReadsRepository {
  let r = readsByPool.get(app.pool);
  if (!r) readsByPool.set(app.pool, (r = createReadsRepository(app.pool)));
  return r;
}

/**
 * Runs `run` on behalf of many callers, one run at a time. A caller never shares a run that was
 * already under way when it called (its answer could predate the caller): it waits for the next
 * run, which every caller that arrived meanwhile shares. So each caller gets an answer read
 * after it asked, and a crowd of concurrent callers costs one run, not one each.
 */
export function coalesced<T>(run: () => Promise<T>): () => Promise<T> {
  let running = false;
  let waiting: Array<{ resolve: (v: T) => void; reject: (err: unknown) => void }> = [];
  const next = (): void => {
    running = true;
    const batch = waiting;
    waiting = [];
    run()
      .then(
        (v) => {
          for (const w of batch) w.resolve(v);
        },
        (err: unknown) => {
          for (const w of batch) w.reject(err);
        },
      )
      .finally(() => {
        running = false;
        if (waiting.length) next();
      });
  };
  return () =>
    new Promise<T>((resolve, reject) => {
      waiting.push({ resolve, reject });
      if (!running) next();
    });
}

const snapshotsByPool = new WeakMap<object, () => Promise<string>>();

/**
 * The database's commit snapshot, read after the call (see commitSnapshot): when it equals the
 * snapshot a cached answer was read at, nothing has been written since and the answer is still
 * exact. Concurrent callers share one query.
 */
export function snapshotOf(app: FastifyInstance): () => Promise<string> {
  let s = snapshotsByPool.get(app.pool);
  if (!s) snapshotsByPool.set(app.pool, (s = coalesced(() => commitSnapshot(app.pool))));
  return s;
}

/** Numbers to JSON: NaN and infinities become null. */
export function fin(v: number | null | undefined): number | null {
  return v === null || v === undefined || !Number.isFinite(v) ? null : v;
}

/**
 * What of a unit is not judged yet and why (services/core/judgement.ts), from its latest
 * analysed ring, its baseline outlook and, where drift is shown, how many drift states exist.
 */
export async function notJudgedOf(
  reads: ReadsRepository,
  unitId: string,
  latest: StoredAnalysis | null,
  settings: JudgementSettings,
  driftStates?: number,
): Promise<{ notJudged: NotJudged[]; baselineDueTs: string | null }> {
  const o = await reads.baselineOutlook(unitId);
  const j = judgement({
    unitId,
    ringsStored: o?.ringsStored ?? 0,
    ringsAnalysed: o?.ringsAnalysed ?? 0,
    watermarkMs: o?.watermarkMs ?? null,
    latest: latest ? { steady: latest.steady, limitFromBaseline: latest.limitFromBaseline, baselineVersion: latest.baselineVersion, loadFraction: latest.loadFraction } : null,
    baselineVersion: o?.version ?? null,
    firstSteadyMs: o?.firstSteadyMs ?? null,
    pendingRequest: o?.pendingRequest ?? null,
    baselineAutoDays: settings.baselineAutoDays,
    driftStates,
    driftSchedule: settings.driftCron,
    baselineInForceFromMs: o?.inForceFromMs ?? null,
    periods: o?.periods ?? [],
  });
  return { notJudged: j.notJudged, baselineDueTs: j.baselineDueMs === null ? null : new Date(j.baselineDueMs).toISOString() };
}
