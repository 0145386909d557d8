/**
 * What the read routes share: time windows with their bounds (a request for more history than
 * a resolution allows is refused with a sentence saying what is allowed), the unit lookup that
 * answers 404, schema pieces, the read repository bound to the application's pool, and the
 * commit snapshot that tells the cached routes whether anything was written since they read.
 */
import type { FastifyInstance } from 'fastify';
import { Type } from 'typebox';
import { commitSnapshot, createReadsRepository, type ReadsRepository } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import { badRequest, notFound } from '../errors.ts';
import { ErrorReply } from '../schemas.ts';

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
