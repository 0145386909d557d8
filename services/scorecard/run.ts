/**
 * Runs a scorecard fleet through the whole service, in this process, on the database behind
 * `pool`: the units are registered, the HTTP application (ingest and read API) listens on a
 * loopback port, the worker runs with the configuration it is given, and the fleet's rings are
 * sent day by day, all units together in time order, as NDJSON to POST /v1/rings. After each
 * simulated day, once the worker has analysed it, the nightly drift computation is run as of
 * that midnight, as the worker's schedule would in live operation. At the end the alerts are
 * read back through GET /v1/alerts (with their history) and scored against ground truth
 * (scorecard.ts). Shared by `npm run scorecard` and the scorecard tests.
 */
import { buildApp } from '../cli/app.ts';
import type { Config } from '../db/config.ts';
import { createKeysRepository } from '../db/keys.ts';
import type { Logger } from '../db/logger.ts';
import type { Pool } from '../db/pool.ts';
import { createUnitsRepository } from '../db/units.ts';
import { startWorker } from '../worker/index.ts';
import { simulateUnit } from '../sim/generator.ts';
import { mergeByTime } from '../sim/merge.ts';
import { DAY_MS } from '../sim/operation.ts';
import { fleetTruth, pluggingDepthReachedMs, ringIntervalS, scoreAlerts, type ScorecardFigures, type ScorecardFleet, type ScoredAlert } from './scorecard.ts';
import type { GroundTruth } from '../sim/types.ts';

export interface ScorecardRunOptions {
  pool: Pool;
  config: Config;
  logger: Logger;
  fleet: ScorecardFleet;
  /** Seconds between rings in steady running, for units the fleet gives no rate of its own (default 60). */
  steadyIntervalS?: number;
  /** Progress lines for people (default: none). */
  say?: (line: string) => void;
  /**
   * How the rings reach the service: `live` (default), day by day with all units together and the
   * nightly drift run after each day, as gateways send them; `import`, each unit's whole history
   * in one go, unit after unit, as `cansight import` sends a file, with no drift run called:
   * baselines, drift and alerts must then follow ring time alone.
   */
  feed?: ScorecardFeed;
}

export type ScorecardFeed = 'live' | 'import';

export interface ScorecardRun {
  figures: ScorecardFigures;
  truths: GroundTruth[];
  alerts: ScoredAlert[];
  rings: number;
  seconds: number;
}

const RINGS_PER_REQUEST = 5_000;

/**
 * Sends one NDJSON body as a gateway would: a 503 (nothing stored) or a connection broken before
 * the reply (a kept-alive connection closed by the server as it was reused) is retried after a
 * pause, a few times. Ingest is idempotent by (unit, time), so a retry never stores a ring twice.
 */
async function post(url: string, key: string, body: string): Promise<number> {
  let res: Response | null = null;
  let reply: { accepted?: number; duplicates?: number; rejected?: unknown[]; message?: string } = {};
  for (let attempt = 1; ; attempt++) {
    try {
      res = await fetch(`${url}/v1/rings`, { method: 'POST', headers: { authorization: `Bearer ${key}`, 'content-type': 'application/x-ndjson' }, body });
      reply = (await res.json()) as typeof reply;
      if (res.status !== 503 || attempt === 5) break;
    } catch (err) {
      if (attempt === 5) throw err;
    }
    await new Promise((r) => setTimeout(r, 500 * attempt));
  }
  if (!res) throw new Error('ingest gave no reply');
  if (!res.ok) throw new Error(`ingest answered ${res.status}: ${reply.message ?? ''}`);
  if (reply.rejected && reply.rejected.length) throw new Error(`ingest rejected ${reply.rejected.length} rings, e.g. ${JSON.stringify(reply.rejected[0])}`);
  return reply.accepted ?? 0;
}

/**
 * Waits until every unit's analysis watermark has reached the time given for it (and, with
 * `settled`, no re-analysis is asked for or running: a history's rings all judged by their final
 * baseline).
 */
async function waitForWatermarks(pool: Pool, lastMs: Map<string, number>, settled = false): Promise<void> {
  const ids = [...lastMs.keys()];
  for (;;) {
    const { rows } = await pool.query(
      `SELECT unit_id, watermark_ts, reanalyse_from IS NULL AND reanalysis_to IS NULL AS idle FROM analysis_progress WHERE unit_id = ANY($1)`,
      [ids],
    );
    const at = new Map<string, number>(
      rows.map((r: { unit_id: string; watermark_ts: Date | null; idle: boolean }) => [r.unit_id, r.watermark_ts && (r.idle || !settled) ? r.watermark_ts.getTime() : -Infinity]),
    );
    if (ids.every((id) => (at.get(id) ?? -Infinity) >= (lastMs.get(id) as number))) return;
    await new Promise((r) => setTimeout(r, 50));
  }
}

async function readAllAlerts(url: string, key: string): Promise<ScoredAlert[]> {
  const out: ScoredAlert[] = [];
  let cursor: string | null = null;
  do {
    const q = new URLSearchParams({ state: 'all', limit: '200' });
    if (cursor) q.set('cursor', cursor);
    const res = await fetch(`${url}/v1/alerts?${q}`, { headers: { authorization: `Bearer ${key}` } });
    if (!res.ok) throw new Error(`GET /v1/alerts answered ${res.status}: ${await res.text()}`);
    const body = (await res.json()) as { alerts: ScoredAlert[]; next: string | null };
    out.push(...body.alerts);
    cursor = body.next;
  } while (cursor);
  return out;
}

/** Runs the fleet through ingest, the worker and the alert rules, and scores the alerts. */
export async function runScorecard(o: ScorecardRunOptions): Promise<ScorecardRun> {
  const t0 = performance.now();
  const { pool, config, logger, fleet } = o;
  const say = o.say ?? (() => undefined);
  const steadyIntervalS = o.steadyIntervalS ?? 60;
  const units = createUnitsRepository(pool);
  for (const u of fleet.units) {
    const { id, name, site, family, ...cfg } = u.config;
    await units.create({ id, name, site, family }, cfg, 'scorecard');
  }
  const keys = createKeysRepository(pool);
  const ids = fleet.units.map((u) => u.config.id);
  const ingestKey = (await keys.create('ingest', ids, 'scorecard feed')).key;
  const viewerKey = (await keys.create('viewer', null, 'scorecard reader')).key;
  const app = await buildApp({ config, pool, logger, parts: { api: true, ingest: true } });
  const url = await app.listen({ host: '127.0.0.1', port: 0 });
  const worker = await startWorker({ pool, logger, config, workerId: 'scorecard' });
  let rings = 0;
  const sendAll = async (ringsInOrder: Iterable<{ unitId: string; ts: string }>, lastMs: Map<string, number>) => {
    let body = '';
    let n = 0;
    for (const ring of ringsInOrder) {
      body += JSON.stringify(ring) + '\n';
      lastMs.set(ring.unitId, Date.parse(ring.ts));
      if (++n === RINGS_PER_REQUEST) {
        rings += await post(url, ingestKey, body);
        body = '';
        n = 0;
      }
    }
    if (n) rings += await post(url, ingestKey, body);
  };
  const simulateDay = (u: ScorecardFleet['units'][number], day: number) =>
    simulateUnit(u, { from: day, to: Math.min(day + DAY_MS, fleet.toMs), seed: fleet.seed, steadyIntervalS: ringIntervalS(fleet, u.config.id, day, steadyIntervalS) });
  try {
    if (o.feed === 'import') {
      // One history per unit, sent whole before the next unit's, then every unit caught up.
      const lastMs = new Map<string, number>();
      for (const [i, u] of fleet.units.entries()) {
        const days: number[] = [];
        for (let day = fleet.fromMs; day < fleet.toMs; day += DAY_MS) days.push(day);
        await sendAll((function* () { for (const day of days) yield* simulateDay(u, day).rings(); })(), lastMs);
        say(`unit ${i + 1}/${fleet.units.length} (${u.config.id}) imported; ${rings} rings sent (${Math.round((performance.now() - t0) / 1000)} s)`);
      }
      await waitForWatermarks(pool, lastMs, true);
      say(`every unit's history analysed (${Math.round((performance.now() - t0) / 1000)} s)`);
      return await scored();
    }
    // Day d+1 is sent while the worker is still analysing day d; the drift run for day d waits
    // for day d's analysis (in live operation too it runs a little after midnight).
    let previous: { end: number; lastMs: Map<string, number> } | null = null;
    const finishDay = async (p: { end: number; lastMs: Map<string, number> }) => {
      await waitForWatermarks(pool, p.lastMs);
      await worker.runDrift(p.end);
      const dayNo = Math.round((p.end - fleet.fromMs) / DAY_MS);
      say(`day ${dayNo}/${Math.round((fleet.toMs - fleet.fromMs) / DAY_MS)} analysed, drift run; ${rings} rings sent (${Math.round((performance.now() - t0) / 1000)} s)`);
    };
    for (let day = fleet.fromMs; day < fleet.toMs; day += DAY_MS) {
      const end = Math.min(day + DAY_MS, fleet.toMs);
      const lastMs = new Map<string, number>();
      await sendAll(mergeByTime(fleet.units.map((u) => simulateDay(u, day))), lastMs);
      if (previous) await finishDay(previous);
      previous = { end, lastMs };
    }
    if (previous) await finishDay(previous);
    return await scored();
  } finally {
    await worker.stop();
    await app.close();
  }

  async function scored(): Promise<ScorecardRun> {
    const alerts = await readAllAlerts(url, viewerKey);
    const truths = fleetTruth(fleet);
    const depth10 = new Map<string, number | null>();
    for (const t of truths) {
      const f = t.faults.find((x) => x.kind === 'nozzle_plugging');
      const unit = fleet.units.find((u) => u.config.id === t.unitId);
      if (f && unit) depth10.set(t.unitId, pluggingDepthReachedMs(unit, f, fleet.seed, fleet.toMs));
    }
    const figures = scoreAlerts(fleet, truths, alerts, depth10);
    return { figures, truths, alerts, rings, seconds: (performance.now() - t0) / 1000 };
  }
}
