/**
 * The periodic alert jobs of a worker: webhook delivery from the outbox, shelf expiry, and the
 * silent-unit check. Each job is an exported function of (pool, now, …) so tests drive time by
 * passing `now`; `startAlertJobs` runs them on timers. Several workers may run them at once:
 * outbox rows and expiring shelves are claimed with FOR UPDATE SKIP LOCKED, and a unit's
 * unit_silent condition is changed under a transaction-level advisory lock.
 *
 * Webhook requests: POST, JSON body as stored in the outbox, with
 *   X-Cansight-Signature: sha256=<hex HMAC-SHA256 of "<timestamp>.<raw body>", keyed with the subscription's secret>
 *   X-Cansight-Timestamp: <RFC 3339 time of this attempt>
 *   X-Cansight-Event, X-Cansight-Delivery (outbox row id: the same on every retry), X-Cansight-Attempt.
 * A 2xx answer is delivered; anything else, a timeout or no connection is retried after a delay
 * drawn uniformly from [0, min(backoffMaxS, backoffBaseS·2^(attempt−1))] ("full jitter"), until
 * maxTries attempts have been made; then the row is dead-lettered. Every attempt is logged in
 * webhook_deliveries. Delivery is at least once: a receiver deduplicates on the body's eventId.
 */
import { lookup as dnsLookup } from 'node:dns/promises';
import { request as httpRequest, type RequestOptions } from 'node:http';
import { request as httpsRequest } from 'node:https';
import { checkTarget, type LookupAll } from '../core/webhook-target.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import { isDatabaseUnavailable, withTransaction, type Pool } from '../db/pool.ts';
import { claimDueDeliveries, finishAttempt, pruneWebhookLog, type ClaimedDelivery, SIGNATURE_HEADER, TIMESTAMP_HEADER, signBody } from '../db/webhooks.ts';
import { closeAlert, expireDueShelves } from '../db/alert-actions.ts';
import { isShelved, type AlertChange } from '../db/alert-rows.ts';
import { latestRing, openAlertForUpdate, tryLockCondition, unitFreshness, type LatestRing } from '../db/alert-rule-state.ts';
import { recordChange } from '../db/alert-changes.ts';
import { loadAlertSettings, newAlert, type AlertSettings } from './alerts.ts';


/** Delay before the next try after failed attempt `attempt` (from 1), seconds: full jitter over the exponential cap. */
export function backoffDelayS(attempt: number, w: Pick<Config['webhooks'], 'backoffBaseS' | 'backoffMaxS'>, random: () => number = Math.random): number {
  const cap = Math.min(w.backoffMaxS, w.backoffBaseS * 2 ** Math.max(0, attempt - 1));
  return random() * cap;
}

export interface DeliveryOutcome {
  attempted: number;
  delivered: number;
  retried: number;
  dead: number;
}

interface JobOptions {
  logger?: Logger;
  /** For tests: the jitter's random source. */
  random?: () => number;
  /** For tests: how webhook host names are resolved (node:dns by default). */
  lookup?: LookupAll;
}

/**
 * A short reason for a failed attempt: what kind of failure, never the raw socket error (whose
 * codes and texts would tell an admin key holder about the networks the worker sits in).
 */
function describeError(err: unknown): string {
  const e = err as { name?: string; code?: string };
  if (e?.name === 'TimeoutError' || e?.name === 'AbortError' || e?.code === 'ETIMEDOUT') return 'timed out';
  switch (e?.code) {
    case 'ECONNREFUSED':
      return 'connection refused';
    case 'ECONNRESET':
    case 'EPIPE':
      return 'connection reset';
    case 'ENOTFOUND':
    case 'EAI_AGAIN':
      return 'name not found';
    case 'EHOSTUNREACH':
    case 'ENETUNREACH':
      return 'address unreachable';
  }
  if (typeof e?.code === 'string' && (e.code.startsWith('ERR_TLS') || e.code.includes('CERT') || e.code.startsWith('ERR_SSL'))) return 'TLS handshake failed';
  return 'could not connect';
}

/** Every address of a host name. */
const lookupAll: LookupAll = (host) => dnsLookup(host, { all: true });

/**
 * One POST of a delivery. The target is checked again now (a name may have changed its
 * addresses since the subscription) and the connection goes to the address that was checked:
 * the socket's lookup answers with it, so no second resolution can send it elsewhere, while TLS
 * still checks the certificate against the URL's host name. Redirects are not followed.
 */
async function attempt(d: ClaimedDelivery, now: Date, w: Pick<Config['webhooks'], 'timeoutMs' | 'allowHosts'>, lookup: LookupAll): Promise<{ statusCode: number | null; error: string | null; durationMs: number }> {
  const started = performance.now();
  const done = (statusCode: number | null, error: string | null) => ({ statusCode, error, durationMs: performance.now() - started });
  let url: URL;
  try {
    url = new URL(d.url);
  } catch {
    return done(null, 'not an address');
  }
  const target = await checkTarget(url, lookup, w.allowHosts);
  if (!target.ok) return done(null, target.unresolved ? 'name not found' : `refused: ${target.reason}`);
  const pinned = ((_host: string, opts: { all?: boolean }, cb: (err: Error | null, address: string | Array<{ address: string; family: number }>, family?: number) => void) => {
    if (opts?.all) cb(null, [{ address: target.address, family: target.family }]);
    else cb(null, target.address, target.family);
  }) as unknown as RequestOptions['lookup'];
  const send = url.protocol === 'https:' ? httpsRequest : httpRequest;
  return new Promise((resolve) => {
    const req = send(url, {
      method: 'POST',
      lookup: pinned,
      signal: AbortSignal.timeout(w.timeoutMs),
      headers: {
        'content-type': 'application/json',
        'content-length': Buffer.byteLength(d.body),
        'user-agent': 'cansight-webhook/1',
        [SIGNATURE_HEADER]: signBody(d.secret, now.toISOString(), d.body),
        [TIMESTAMP_HEADER]: now.toISOString(),
        'x-cansight-event': d.event,
        'x-cansight-delivery': d.outboxId,
        'x-cansight-attempt': String(d.attempt),
      },
    }, (res) => {
      res.resume();
      const status = res.statusCode ?? 0;
      const ok = status >= 200 && status < 300;
      res.on('end', () => resolve(done(status, ok ? null : `HTTP ${status}`)));
      res.on('error', () => resolve(done(status, ok ? null : `HTTP ${status}`)));
    });
    req.on('error', (err) => resolve(done(null, describeError(err))));
    req.end(d.body);
  });
}

/**
 * Claims the outbox rows due at `now` (one batch), POSTs each once, logs every attempt and
 * schedules retries or dead-letters. Returns what happened.
 */
export async function deliverDueWebhooks(pool: Pool, now: Date, settings: Pick<AlertSettings, 'webhooks'>, opts: JobOptions = {}): Promise<DeliveryOutcome> {
  const w = settings.webhooks;
  const leaseS = Math.ceil(w.timeoutMs / 1000) + 30;
  const claimed = await claimDueDeliveries(pool, now, { limit: w.batchSize, leaseS, maxTries: w.maxTries });
  const out: DeliveryOutcome = { attempted: claimed.length, delivered: 0, retried: 0, dead: 0 };
  await Promise.all(
    claimed.map(async (d) => {
      const r = await attempt(d, now, w, opts.lookup ?? lookupAll);
      const delivered = r.error === null;
      const outcome = delivered ? 'delivered' : d.attempt >= w.maxTries ? 'dead' : 'retry';
      const next = outcome === 'retry' ? new Date(now.getTime() + backoffDelayS(d.attempt, w, opts.random) * 1000) : null;
      await finishAttempt(pool, {
        outboxId: d.outboxId,
        webhookId: d.webhookId,
        unitId: d.unitId,
        attempt: d.attempt,
        attemptedAt: now,
        durationMs: r.durationMs,
        statusCode: r.statusCode,
        error: r.error,
        outcome,
        nextAttemptAt: next,
      });
      out[outcome === 'retry' ? 'retried' : outcome]++;
      const log = { unitId: d.unitId, webhookId: d.webhookId, outboxId: d.outboxId, alertId: d.alertId, event: d.event, attempt: d.attempt, statusCode: r.statusCode, error: r.error, outcome, nextAttemptAt: next?.toISOString() ?? null };
      if (outcome === 'dead') opts.logger?.warn(log, 'webhook dead-lettered');
      else opts.logger?.info(log, 'webhook attempt');
    }),
  );
  return out;
}

/** Brings back every alert whose shelf ended at or before `now`, each with its history row. */
export async function expireShelves(pool: Pool, now: Date, opts: JobOptions = {}): Promise<AlertChange[]> {
  const all: AlertChange[] = [];
  for (;;) {
    const batch = await expireDueShelves(pool, now, 100);
    for (const c of batch) opts.logger?.info({ unitId: c.unitId, alertId: c.alertId, kind: c.kind }, 'shelf expired');
    all.push(...batch);
    if (batch.length < 100) return all;
  }
}

/** Deletes finished outbox rows and their delivery log older than webhooks.keepDays before `now`. */
export async function pruneWebhooks(pool: Pool, now: Date, settings: Pick<AlertSettings, 'webhooks'>, opts: JobOptions = {}): Promise<number> {
  const before = new Date(now.getTime() - settings.webhooks.keepDays * 86_400_000);
  let total = 0;
  for (;;) {
    const n = await pruneWebhookLog(pool, before, 1000);
    total += n;
    if (n < 1000) break;
  }
  if (total) opts.logger?.info({ rows: total, before: before.toISOString() }, 'webhook log pruned');
  return total;
}

const SILENT_KEY = 'unit_silent';

/**
 * Raises unit_silent for each unit whose data has stopped: its latest ring (by ring time) is
 * older than unitSilentS at `now`, both by its time stamp and by when it arrived (so a history
 * import that is still catching up does not count as silence). A unit that has never sent a
 * ring is not judged. Returns the alert to normal when fresh rings arrive. The silence time is
 * its own on-delay; there is no off-delay. Times are wall-clock.
 */
export async function checkSilentUnits(pool: Pool, now: Date, settings: Pick<AlertSettings, 'unitSilentS'>, opts: JobOptions = {}): Promise<AlertChange[]> {
  if (settings.unitSilentS <= 0) return [];
  const limitMs = settings.unitSilentS * 1000;
  const silent = (r: LatestRing | null) => r !== null && now.getTime() - Math.max(r.ts.getTime(), r.receivedAt.getTime()) > limitMs;
  const changes: AlertChange[] = [];
  for (const u of await unitFreshness(pool)) {
    const wantActive = silent(u.lastRing);
    if (wantActive === u.silentActive) continue;
    const change = await withTransaction(pool, async (c) => {
      if (!(await tryLockCondition(c, u.unitId, SILENT_KEY))) return null;
      const last = await latestRing(c, u.unitId);
      const a = await openAlertForUpdate(c, u.unitId, SILENT_KEY);
      if (last && silent(last)) {
        if (a?.active) return null;
        const lastAt = Math.max(last.ts.getTime(), last.receivedAt.getTime());
        const silentForS = Math.round((now.getTime() - lastAt) / 1000);
        const evidence = { lastRingTs: last.ts.toISOString(), lastReceivedAt: last.receivedAt.toISOString(), silentForS, limitS: settings.unitSilentS };
        const subject = {
          kind: 'unit_silent' as const,
          grade: 'warning' as const,
          chamber: null,
          thermocouple: null,
          likelihood: null,
          runnerUpChamber: null,
          runnerUpLikelihood: null,
          evidence,
          baselineVersion: null,
          message: `no exhaust ring from unit ${u.unitId} for ${Math.round(silentForS / 60)} min (latest ring ${last.ts.toISOString()})`,
          advice: 'check the plant gateway and its link to the unit; until data returns Cansight cannot see this exhaust ring',
        };
        if (a) {
          const from = a.grade;
          a.active = true;
          a.clearedAt = null;
          a.lastChangedAt = now;
          a.lastSeenAt = now;
          a.message = subject.message;
          a.advice = subject.advice;
          a.evidence = evidence;
          return recordChange(c, a, { action: 'reactivated', at: now, fromGrade: from, details: evidence, notify: !isShelved(a, now) });
        }
        return recordChange(c, newAlert(u.unitId, SILENT_KEY, subject, 'warning', now), { action: 'raised', at: now, details: evidence }, true);
      }
      if (!a || !a.active) return null;
      a.active = false;
      a.clearedAt = now;
      a.lastChangedAt = now;
      const closes = a.acknowledged;
      const notify = !isShelved(a, now);
      if (closes) closeAlert(a, now);
      return recordChange(c, a, { action: 'returned_to_normal', at: now, details: { lastRingTs: last ? last.ts.toISOString() : null, closed: closes }, notify });
    });
    if (change) {
      changes.push(change);
      opts.logger?.info({ unitId: u.unitId, alertId: change.alertId, action: change.action }, change.action === 'returned_to_normal' ? 'unit data resumed' : 'unit silent');
    }
  }
  return changes;
}

/** Runs fn now and then `everyMs` after each run ends, until stopped; errors are logged, not thrown. */
function repeat(everyMs: number, name: string, logger: Logger, fn: () => Promise<unknown>) {
  let stopped = false;
  let timer: NodeJS.Timeout | undefined;
  let running: Promise<void> | undefined;
  const tick = () => {
    running = fn()
      .then(() => undefined)
      .catch((err) => {
        if (isDatabaseUnavailable(err)) logger.warn({ job: name, err: (err as Error).message }, 'alert job: database unavailable; will retry');
        else logger.error({ job: name, err }, 'alert job failed');
      })
      .finally(() => {
        running = undefined;
        if (!stopped) {
          timer = setTimeout(tick, everyMs);
          timer.unref();
        }
      });
  };
  timer = setTimeout(tick, 0);
  timer.unref();
  return {
    async stop() {
      stopped = true;
      if (timer) clearTimeout(timer);
      await running;
    },
  };
}

/**
 * Starts the worker's alert jobs: webhook delivery every webhooks.pollMs (draining full batches
 * at once), shelf expiry and the silent-unit check every alerts.checkIntervalS, and pruning of
 * the finished webhook log every hour.
 */
export function startAlertJobs(deps: { pool: Pool; logger: Logger; config: Config }): { stop(): Promise<void> } {
  const settings = loadAlertSettings(deps.config);
  const logger = deps.logger.child({ component: 'alert-jobs' });
  const jobs = [
    repeat(settings.webhooks.pollMs, 'webhooks', logger, async () => {
      for (let i = 0; i < 50; i++) {
        const r = await deliverDueWebhooks(deps.pool, new Date(), settings, { logger });
        if (r.attempted < settings.webhooks.batchSize) break;
      }
    }),
    repeat(settings.checkIntervalS * 1000, 'shelves', logger, () => expireShelves(deps.pool, new Date(), { logger })),
    repeat(settings.checkIntervalS * 1000, 'silent-units', logger, () => checkSilentUnits(deps.pool, new Date(), settings, { logger })),
    repeat(3_600_000, 'webhook-log', logger, () => pruneWebhooks(deps.pool, new Date(), settings, { logger })),
  ];
  logger.info({ pollMs: settings.webhooks.pollMs, checkIntervalS: settings.checkIntervalS, unitSilentS: settings.unitSilentS }, 'alert jobs started');
  return {
    async stop() {
      await Promise.all(jobs.map((j) => j.stop()));
    },
  };
}
