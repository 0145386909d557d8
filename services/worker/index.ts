/**
 * The worker process: claims a fair share of the fleet's units (leases renewed while it runs,
 * given back when it stops or holds more than its share), analyses each held unit's new rings
 * as soon as ingest says they are committed (LISTEN) and on a node-cron sweep as a safety net,
 * finds and analyses late rings, fits a unit's first baseline when it has enough steady data
 * and the baselines people request (at each sweep, once analysis has passed their window),
 * computes drift nightly, and runs the alert jobs (webhook delivery, shelf expiry, silent units).
 */
import { hostname } from 'node:os';
import { randomBytes } from 'node:crypto';
import cron from 'node-cron';
import { defaultThresholds } from '../core/findings.ts';
import { defaultStartOptions } from '../core/starts.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import type { Pool } from '../db/pool.ts';
import { ensureProgressRows, findLateRings, receivedHorizon, requestReanalysis, setLateCheckedFrom, type LateRings } from '../db/progress.ts';
import { claimUnits, ensureClaimRows, heartbeat, liveWorkerCount, releaseUnits, renewLeases, retireWorker, workersOnHost } from '../db/claims.ts';
import { startAlertJobs } from './alert-jobs.ts';
import { deadbandThresholds, loadAlertSettings } from './alerts.ts';
import { fitDueRequests, fitFirstBaseline, fitPeriodBaseline } from './baselines.ts';
import { firstSteadyMs } from '../db/baselines.ts';
import { runDrift, runNightlyDrift, type DriftRunResult } from './drift.ts';
import { startListener } from './listener.ts';
import { analyseGroup, invalidateInputs, memoryOf, reanalyseSpan, ROLLUP_HOLD_MS, rollupsDue, spansOf, type PipelineContext } from './pipeline.ts';

export interface WorkerDeps {
  pool: Pool;
  logger: Logger;
  config: Config;
  /** Defaults to host-pid-random. */
  workerId?: string;
}

export interface Worker {
  readonly workerId: string;
  /** Units this worker holds now. */
  units(): string[];
  /** Runs the safety-net sweep now (claims, late rings, every held unit). */
  sweep(): Promise<void>;
  /** Runs the nightly drift computation now for the held units, as of asOfMs. */
  runDrift(asOfMs?: number): Promise<DriftRunResult[]>;
  /** Resolves when no unit is waiting or being analysed. */
  settled(): Promise<void>;
  stop(): Promise<void>;
}

/** How often a unit without a baseline and without a steady ring is looked at again. */
const AUTO_FIT_CHECK_MS = 30_000;
const RETRY_MS = 1_000;
/** Most units analysed in one transaction. */
const GROUP_UNITS = 16;
/**
 * Rounds in flight per unit of configured concurrency. A live round is mostly waits on the
 * database (per unit a few short statements of the start and alert rules), so several rounds
 * in flight overlap those waits; the analysis itself still runs one round at a time.
 */
const LANES_PER_SLOT = 3;
/** Connections of the pool kept for the listener, the claim cycle, the sweep and the alert jobs. */
const RESERVED_CONNECTIONS = 4;

export async function startWorker(deps: WorkerDeps): Promise<Worker> {
  const { pool, config } = deps;
  const s = config.worker;
  /** Late rings of a unit found at once from which it is judged again in order (below: their spans only). */
  const workerId = deps.workerId ?? s.id ?? `${hostname()}-${process.pid}-${randomBytes(3).toString('hex')}`;
  const log = deps.logger.child({ component: 'worker', workerId });
  const alertSettings = loadAlertSettings(config);
  const pc: PipelineContext = {
    pool,
    logger: log,
    config,
    workerId,
    alertSettings,
    raise: defaultThresholds,
    hold: deadbandThresholds(defaultThresholds, alertSettings),
    memory: new Map(),
    holdRollups: true,
  };
  /** Units whose held rollups the next round writes, whether or not new rings came. */
  const writeRollupsFor = new Set<string>();

  const owned = new Set<string>();
  const dirty = new Set<string>();
  const running = new Map<string, Promise<void>>();
  const late = new Map<string, LateRings & { horizon: Date }>();
  const waiters: Array<() => void> = [];
  let stopped = false;

  const checkSettled = () => {
    if (running.size === 0 && dirty.size === 0) while (waiters.length) (waiters.shift() as () => void)();
  };

  const mark = (ids: Iterable<string>) => {
    for (const id of ids) if (owned.has(id) && !dirty.has(id)) dirty.add(id);
    pump();
  };

  /** Units whose last group failed: analysed alone until they succeed, so one cannot hold back others. */
  const solo = new Set<string>();
  /** Units whose last round left more rings waiting (a backlog, not a live trickle). */
  const backlog = new Set<string>();
  let groups = 0;
  /** Groups in flight holding a unit with a backlog: at most `concurrency` (they are mostly analysis). */
  let heavy = 0;
  const lanes = Math.max(s.concurrency, Math.min(s.concurrency * LANES_PER_SLOT, config.poolMax - RESERVED_CONNECTIONS));

  /**
   * Starts groups of waiting units (up to GROUP_UNITS each) while fewer than `lanes` run; groups
   * with a backlogged unit only while fewer than `concurrency` of those run.
   */
  function pump(): void {
    if (stopped) return;
    while (groups < lanes) {
      const heavyFree = s.concurrency - heavy;
      const eligible = (id: string) => !running.has(id) && (heavyFree > 0 || !backlog.has(id));
      let waiting = 0;
      for (const id of dirty) if (eligible(id)) waiting++;
      // Share the waiting units among the free slots, so a backlog keeps every slot busy.
      const size = Math.min(GROUP_UNITS, Math.max(1, Math.ceil(waiting / (heavyFree > 0 ? heavyFree : lanes - groups))));
      const group: string[] = [];
      for (const id of dirty) {
        if (!eligible(id)) continue;
        if (solo.has(id)) {
          if (group.length === 0) group.push(id);
          break;
        }
        group.push(id);
        if (group.length >= size) break;
      }
      if (group.length === 0) break;
      for (const id of group) dirty.delete(id);
      groups++;
      const isHeavy = group.some((id) => backlog.has(id));
      if (isHeavy) heavy++;
      const task = runGroup(group).finally(() => {
        groups--;
        if (isHeavy) heavy--;
        for (const id of group) running.delete(id);
        pump();
        checkSettled();
      });
      for (const id of group) running.set(id, task);
    }
    checkSettled();
  }

  async function lateRings(unitId: string): Promise<boolean> {
    const work = late.get(unitId);
    if (!work) return true;
    late.delete(unitId);
    if (work.times.length >= s.lateRewindRings || work.belowSpeed) {
      // History arriving out of order (months of an import in any order), or late rings of a
      // start, a run-down or a trip (the start detector reads rings in order only): judge
      // everything from the earliest late ring on again, in ring order, starts, alerts and drift
      // with it, as if it had come in order. A few late rings at speed are analysed in their
      // span (below); alerts stay as they are.
      const from = work.times[0];
      await requestReanalysis(pool, unitId, from);
      await setLateCheckedFrom(pool, [unitId], work.horizon);
      log.info({ unitId, from: new Date(from).toISOString(), rings: work.times.length, belowSpeed: work.belowSpeed }, 'rings arrived out of order; judging them again in ring order from the earliest');
      return true;
    }
    for (const [a, b] of spansOf(work.times)) {
      const n = await reanalyseSpan(pc, unitId, a, b, 'late');
      if (n === null) {
        owned.delete(unitId);
        return false;
      }
      log.info({ unitId, from: new Date(a).toISOString(), to: new Date(b).toISOString(), rings: n }, 'late rings analysed');
    }
    await setLateCheckedFrom(pool, [unitId], work.horizon);
    return true;
  }

  async function runGroup(unitIds: string[]): Promise<void> {
    try {
      const ids: string[] = [];
      for (const id of unitIds) if (await lateRings(id)) ids.push(id);
      const write = new Set(ids.filter((id) => writeRollupsFor.has(id)));
      const results = await analyseGroup(pc, ids, { writeRollups: write });
      for (const id of write) writeRollupsFor.delete(id);
      for (const [unitId, r] of results) {
        solo.delete(unitId);
        if (r.status === 'lost') {
          owned.delete(unitId);
          log.info({ unitId }, 'unit no longer held');
          continue;
        }
        if (r.rings > 0) log.debug({ unitId, rings: r.rings }, 'rings analysed');
        if (r.status === 'more') {
          backlog.add(unitId);
          dirty.add(unitId);
        } else backlog.delete(unitId);
        await firstBaselineWhenDue(unitId, r.status === 'more');
        await periodBaselineWhenDue(unitId);
      }
    } catch (err) {
      for (const unitId of unitIds) {
        log.error({ unitId, units: unitIds.length, err: (err as Error).message }, 'analysis round failed; retrying');
        solo.add(unitId);
      }
      setTimeout(() => mark(unitIds), RETRY_MS).unref();
    }
  }

  let cycle: Promise<void> | null = null;
  /** One claim cycle at a time (the timer and the sweep both ask for one). */
  function claimCycle(): Promise<void> {
    cycle ??= claimCycleOnce().finally(() => {
      cycle = null;
    });
    return cycle;
  }

  /** Fits a unit's first baseline once analysis has passed its first baselineAutoDays of steady data. */
  async function firstBaselineWhenDue(unitId: string, catchingUp = false): Promise<void> {
    const mem = memoryOf(pc, unitId);
    if (mem.baselineVersion !== null || mem.watermarkMs === null || !Number.isFinite(mem.watermarkMs)) return;
    if (mem.autoFitDueMs === null) {
      // Live, the first steady ring is looked for now and then; a unit catching up looks after
      // every batch (a day of rings), so the fit comes at its ring time, not days later.
      if (!catchingUp && Date.now() - mem.lastAutoFitCheck < AUTO_FIT_CHECK_MS) return;
      mem.lastAutoFitCheck = Date.now();
      const first = await firstSteadyMs(pool, unitId, mem.watermarkMs);
      if (first === null) return;
      mem.autoFitFromMs = first;
      mem.autoFitDueMs = first + s.baselineAutoDays * 86_400_000;
    }
    // Due once analysis has passed the due ring time, or has stopped just before it (pipeline.ts).
    if (mem.watermarkMs < mem.autoFitDueMs && !mem.autoFitDueReached) return;
    mem.autoFitDueReached = false;
    const fitted = await fitFirstBaseline(pool, unitId, mem.autoFitFromMs as number, mem.autoFitDueMs, s);
    invalidateInputs(pc, unitId);
    if (fitted) log.info({ unitId, baselineVersion: fitted.version, from: fitted.windowFrom, to: fitted.windowTo }, 'first baseline fitted');
    // Too few steady rings per load bin yet: try again with one more day of data.
    else mem.autoFitDueMs = mem.watermarkMs + 86_400_000;
  }

  /**
   * Fits the baseline of a period started by maintenance once analysis has passed the ring time
   * it falls due (baselineAutoDays after the work), from the steady rings since the work.
   */
  async function periodBaselineWhenDue(unitId: string): Promise<void> {
    const mem = memoryOf(pc, unitId);
    const pf = mem.periodFit;
    if (!pf || mem.watermarkMs === null || !Number.isFinite(mem.watermarkMs)) return;
    if (mem.watermarkMs < pf.dueMs && !pf.reached) return;
    pf.reached = false;
    const fitted = await fitPeriodBaseline(pool, unitId, pf.fromMs, pf.dueMs, s);
    invalidateInputs(pc, unitId);
    if (fitted === 'present') mem.periodFit = null;
    else if (fitted) {
      mem.periodFit = null;
      log.info({ unitId, baselineVersion: fitted.version, from: fitted.windowFrom, to: fitted.windowTo }, 'baseline fitted for the period since maintenance');
    }
    // Too few steady rings per load bin since the work: try again with one more day of data.
    else pf.dueMs = mem.watermarkMs + 86_400_000;
  }

  /**
   * Workers of this host whose process has died (a kill -9, a crash, a power cut before a
   * restart) hold their units until their leases lapse; this host can tell they are gone, so
   * their units are freed at once and a restarted process takes them back in its first claim
   * cycle. A process that still answers is left to its lease (it may be alive, or its pid
   * reused: then the lease decides, as for a worker on another host).
   */
  async function retireDeadSiblings(): Promise<void> {
    for (const w of await workersOnHost(pool, hostname(), workerId)) {
      if (processAlive(w.pid)) continue;
      await retireWorker(pool, w.workerId);
      log.info({ deadWorkerId: w.workerId, pid: w.pid }, 'a worker of this host has died; its units are free at once');
    }
  }

  async function claimCycleOnce(): Promise<void> {
    await heartbeat(pool, workerId, hostname(), process.pid);
    await retireDeadSiblings();
    const all = await ensureClaimRows(pool);
    const held = new Set(await renewLeases(pool, workerId, s.leaseS));
    for (const id of [...owned]) {
      if (!held.has(id)) {
        owned.delete(id);
        pc.memory.delete(id);
        log.warn({ unitId: id }, 'lease lost');
      }
    }
    for (const id of held) owned.add(id);
    const live = await liveWorkerCount(pool, s.leaseS);
    const share = s.maxUnits > 0 ? s.maxUnits : Math.ceil(all.length / live);
    if (owned.size > share) {
      const idle = [...owned].filter((id) => !running.has(id) && !dirty.has(id));
      const busy = [...owned].filter((id) => running.has(id) || dirty.has(id));
      const give = [...idle, ...busy].slice(0, owned.size - share);
      await releaseUnits(pool, workerId, give);
      for (const id of give) {
        owned.delete(id);
        dirty.delete(id);
        pc.memory.delete(id);
      }
      log.info({ units: give }, 'units given back (over fair share)');
    } else if (owned.size < share) {
      const got = await claimUnits(pool, workerId, share - owned.size, s.leaseS);
      if (got.length) {
        await ensureProgressRows(pool, got, await receivedHorizon(pool));
        for (const id of got) owned.add(id);
        log.info({ units: got }, 'units claimed');
        mark(got);
      }
    }
  }

  let sweeping: Promise<void> | null = null;
  /** One sweep at a time (the schedule and callers may ask at once). */
  function sweep(): Promise<void> {
    sweeping ??= sweepOnce().finally(() => {
      sweeping = null;
    });
    return sweeping;
  }

  async function sweepOnce(): Promise<void> {
    if (stopped) return;
    await claimCycle();
    const ids = [...owned];
    const horizon = await receivedHorizon(pool);
    const found = await findLateRings(pool, ids, 1_000_000, defaultStartOptions.tripMinSpeedPct);
    await setLateCheckedFrom(pool, ids.filter((id) => !found.has(id)), horizon);
    for (const [id, work] of found) {
      late.set(id, { ...work, horizon });
      log.info({ unitId: id, rings: work.times.length, belowSpeed: work.belowSpeed }, 'late rings found');
    }
    for (const id of await fitDueRequests(pool, log, ids, s)) invalidateInputs(pc, id);
    mark(ids);
  }

  const jobs = new Set<Promise<void>>();
  /** Runs a periodic job, logging its failure; stop() waits for the jobs in flight. */
  const safely = (what: string, fn: () => Promise<unknown>) => async () => {
    if (stopped) return;
    const job = (async () => {
      try {
        await fn();
      } catch (err) {
        if (!stopped) log.error({ err: (err as Error).message }, `${what} failed`);
      }
    })();
    jobs.add(job);
    try {
      await job;
    } finally {
      jobs.delete(job);
    }
  };

  // Claim loop: renew leases and claim free units well within the lease.
  let claimTimer: NodeJS.Timeout | null = null;
  const claimLoop = async () => {
    await safely('claim cycle', claimCycle)();
    if (!stopped) claimTimer = setTimeout(claimLoop, s.claimEveryS * 1000);
  };
  await claimCycle();
  claimTimer = setTimeout(claimLoop, s.claimEveryS * 1000);

  // Held rollups of units whose rings stopped coming are written by a round of their own.
  const rollupTimer = setInterval(() => {
    const due = rollupsDue(pc).filter((id) => owned.has(id));
    for (const id of due) writeRollupsFor.add(id);
    mark(due);
  }, ROLLUP_HOLD_MS / 2);
  rollupTimer.unref();

  const listener = startListener(pool, log, (units) => mark(units === '*' ? owned : units));
  const sweepTask = cron.schedule(s.sweepCron, safely('sweep', sweep), { noOverlap: true, name: `sweep-${workerId}` });
  const driftTask = s.driftCron
    ? cron.schedule(
        s.driftCron,
        safely('drift', async () => {
          await runNightlyDrift({ pool, logger: log, config }, [...owned], Date.now());
          for (const id of owned) invalidateInputs(pc, id);
        }),
        { noOverlap: true, timezone: 'UTC', name: `drift-${workerId}` },
      )
    : null;
  const alertJobs = startAlertJobs({ pool, logger: deps.logger, config });
  void safely('sweep', sweep)();
  log.info({ units: [...owned], leaseS: s.leaseS, batchRings: s.batchRings }, 'worker started');

  return {
    workerId,
    units: () => [...owned].sort(),
    sweep,
    async runDrift(asOfMs?: number) {
      const r = await runDrift({ pool, logger: log, config }, [...owned], asOfMs);
      for (const id of owned) invalidateInputs(pc, id);
      return r;
    },
    async settled() {
      // Idle, with every held rollup written.
      for (;;) {
        await new Promise<void>((resolve) => {
          waiters.push(resolve);
          checkSettled();
        });
        const due = rollupsDue(pc, true).filter((id) => owned.has(id));
        if (due.length === 0 || stopped) return;
        for (const id of due) writeRollupsFor.add(id);
        mark(due);
      }
    },
    async stop() {
      if (stopped) return;
      stopped = true;
      await sweepTask.destroy();
      await driftTask?.destroy();
      if (claimTimer) clearTimeout(claimTimer);
      clearInterval(rollupTimer);
      await listener.stop();
      await alertJobs.stop();
      await Promise.allSettled([...jobs, ...running.values()]);
      // Write the rollups still held (a worker that dies instead leaves them to be recomputed).
      const held = rollupsDue(pc, true).filter((id) => owned.has(id));
      if (held.length) await analyseGroup(pc, held, { writeRollups: new Set(held) }).catch((err) => log.warn({ err: (err as Error).message, units: held.length }, 'could not write held rollups'));
      await retireWorker(pool, workerId).catch((err) => log.warn({ err: (err as Error).message }, 'could not give units back'));
      log.info({ unitsWithHeldRollups: held }, 'worker stopped');
    },
  };
}

/** True while a process with this pid exists on this host (one owned by another user counts). */
function processAlive(pid: number): boolean {
  if (!Number.isInteger(pid) || pid <= 0) return true;
  try {
    process.kill(pid, 0);
    return true;
  } catch (err) {
    return (err as NodeJS.ErrnoException).code === 'EPERM';
  }
}
