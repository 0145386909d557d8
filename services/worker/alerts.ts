/**
 * The alert rules: turns the core's findings, ring by ring, into alerts with the ISA-18.2 /
 * IEC 62682 life cycle. Runs inside the caller's transaction and never begins or commits one;
 * all SQL is in the alert files of services/db (alert-*.ts, webhooks.ts).
 *
 * Life of an alert (all durations in ring time, i.e. the observations' timestamps, so a
 * backfill gives the same alerts as live operation):
 *
 * - Condition. Keyed by (unit, kind, chamber or thermocouple). spread_high, spread_jump and
 *   coverage_degraded are unit-wide: the chamber or thermocouple they name is the latest
 *   attribution, kept up to date on the alert, not part of the key (otherwise a plume lying
 *   between two chambers would flip between two alerts).
 * - On-delay. A condition is raised only after it has been at the raise level in every
 *   observation for the kind's on-delay (an observation gap over `maxGapS` starts it again).
 *   The alert's grade is the lowest grade seen during the on-delay: the grade that held
 *   throughout. Conditions waiting out their on-delay are kept in alert_pending.
 * - Deadband. While an alert is active it is held by the findings evaluated at the relaxed
 *   thresholds of `deadbandThresholds` (`hold`); the raise level is needed only to raise.
 * - Off-delay. An active alert returns to normal only after its condition has been absent from
 *   `hold` for the kind's off-delay; a return within the off-delay keeps it active.
 * - Grade in place. The grade rises when the raise-level grade is higher, and falls when the
 *   hold-level grade is lower (so the deadband applies between grades too); either way the new
 *   grade must hold for `gradeDelayS` first, and the grade applied is the one that held
 *   throughout that delay. A rise makes the alert unacknowledged again (people acknowledged a
 *   lesser condition); a fall keeps the acknowledgement. Each change writes one history row.
 * - Acknowledged / returned to normal. An alert stays open until it has both returned to
 *   normal and been acknowledged ("returned to normal unacknowledged" stays listed). If its
 *   condition comes back while it is open and returned to normal, the same alert becomes
 *   active again ("reactivated", after the on-delay); otherwise a new alert is raised.
 * - Shelving (by a person, until a time, with a reason; services/db/alert-actions.ts) does not stop the
 *   rules: a shelved alert still changes grade and returns to normal, but those changes send no
 *   webhook until the shelf ends. A rise to alarm or critical ends the shelf (an "unshelved"
 *   history row saying why) and is announced.
 * - Late observations. Observations at or before the unit's alert watermark (the latest ring
 *   time already applied) are ignored, so a late ring or a re-run range moves nothing twice.
 * - unit_silent alerts are owned by the silent-unit check (alert-jobs.ts), not by these rules.
 */
import { gradeRank, GRADES, type Finding, type Grade, type Thresholds } from '../core/findings.ts';
import { ALERT_KINDS, type AlertConfig, type AlertKind, type Config } from '../db/config.ts';
import { closeAlert } from '../db/alert-actions.ts';
import { isShelved, type AlertChange, type AlertRow, type ChangeInput, type Queryable } from '../db/alert-rows.ts';
import { loadOpenRuleAlertsForUpdate, loadPending, lockAlertUnitState, savePending, setAlertWatermark, type PendingCondition } from '../db/alert-rule-state.ts';
import { recordChange, saveAlert } from '../db/alert-changes.ts';
import { takeUpSetAside } from '../db/reanalysis.ts';

export type { AlertChange } from '../db/alert-rows.ts';

/** The grade from which an escalation takes a shelved alert off its shelf. */
const UNSHELVE_AT: Grade = 'alarm';

/**
 * The alert rules' settings: the configuration's (services/db/config.ts AlertConfig), with the
 * on- and off-delay resolved for every kind, and the webhook settings.
 */
export type AlertSettings = Omit<AlertConfig, 'onDelayS' | 'offDelayS' | 'onDelayByKindS' | 'offDelayByKindS'> & {
  /** Per kind: seconds at the raise level before an alert is raised. */
  onDelayS: Record<AlertKind, number>;
  /** Per kind: seconds absent from the hold level before an alert returns to normal. */
  offDelayS: Record<AlertKind, number>;
  webhooks: Config['webhooks'];
};

/**
 * Per-kind delays that differ from the general ones. A spread jump is a change between two
 * consecutive steady rings, so it exists for one ring: it is raised at once and kept visible
 * for ten minutes. unit_silent has its own delay (unitSilentS) and clears when data resumes.
 */
const KIND_DEFAULTS: Partial<Record<AlertKind, { onDelayS: number; offDelayS: number }>> = {
  spread_jump: { onDelayS: 0, offDelayS: 600 },
  unit_silent: { onDelayS: 0, offDelayS: 0 },
  // Start findings are held by the start recorder until a later start clears them (services/worker/starts.ts).
  chamber_unlit: { onDelayS: 0, offDelayS: 0 },
  start_failed: { onDelayS: 0, offDelayS: 0 },
};

/** Alert settings from the configuration: general delays, per-kind defaults, then per-kind variables. */
export function loadAlertSettings(config: Config): AlertSettings {
  const a = config.alerts;
  const onDelayS = {} as Record<AlertKind, number>;
  const offDelayS = {} as Record<AlertKind, number>;
  for (const k of ALERT_KINDS) {
    onDelayS[k] = a.onDelayByKindS[k] ?? KIND_DEFAULTS[k]?.onDelayS ?? a.onDelayS;
    offDelayS[k] = a.offDelayByKindS[k] ?? KIND_DEFAULTS[k]?.offDelayS ?? a.offDelayS;
  }
  const { onDelayByKindS: _on, offDelayByKindS: _off, ...rest } = a;
  return {
    ...rest,
    onDelayS,
    offDelayS,
    webhooks: { ...config.webhooks },
  };
}

/**
 * The hold thresholds: every raise level relaxed by the deadband, so a condition found at
 * `t` is still found at the result until it has fallen clear of its level.
 * - temperature levels (spread limits and margin, spread jump, chamber cold and hot, each
 *   grade) are lowered by deadbandDegC; the spread grades are excesses over the spread limit,
 *   which is itself lowered, so they move with it. Without a baseline the chamber levels are
 *   multiplied by noBaselineChamberFactor, and so is their deadband;
 * - the chamber z-level is lowered by deadbandZ;
 * - drift rates are lowered by the fraction deadbandRatio; the coverage fraction below which
 *   coverage is an alarm is raised by it;
 * - ring counts (recurring outliers, recurring gaps, adjacent failed thermocouples) by one
 *   ring, never below one.
 * Not thresholds, left as they are: noBaselineChamberFactor, swirlUncertaintyDeg.
 */
export function deadbandThresholds(t: Thresholds, settings: Pick<AlertSettings, 'deadbandDegC' | 'deadbandZ' | 'deadbandRatio'>): Thresholds {
  const d = settings.deadbandDegC;
  const r = settings.deadbandRatio;
  return {
    ...t,
    spreadDefaultLimitDegC: t.spreadDefaultLimitDegC - d,
    spreadMarginDegC: t.spreadMarginDegC - d,
    spreadLimitFloorDegC: t.spreadLimitFloorDegC - d,
    spreadLimitCeilingDegC: t.spreadLimitCeilingDegC - d,
    spreadAlarmExcessDegC: t.spreadAlarmExcessDegC,
    spreadCriticalExcessDegC: t.spreadCriticalExcessDegC,
    spreadJumpWarningDegC: Math.max(0, t.spreadJumpWarningDegC - d),
    spreadJumpAlarmDegC: Math.max(0, t.spreadJumpAlarmDegC - d),
    chamberColdWarningDegC: Math.max(0, t.chamberColdWarningDegC - d),
    chamberColdAlarmDegC: Math.max(0, t.chamberColdAlarmDegC - d),
    chamberColdCriticalDegC: Math.max(0, t.chamberColdCriticalDegC - d),
    chamberHotWarningDegC: Math.max(0, t.chamberHotWarningDegC - d),
    chamberHotAlarmDegC: Math.max(0, t.chamberHotAlarmDegC - d),
    chamberHotCriticalDegC: Math.max(0, t.chamberHotCriticalDegC - d),
    chamberNoBaselineWarningDegC: Math.max(0, t.chamberNoBaselineWarningDegC - d),
    chamberMinZ: Math.max(0, t.chamberMinZ - settings.deadbandZ),
    driftWarningDegCPer30Days: t.driftWarningDegCPer30Days * (1 - r),
    driftAlarmDegCPer30Days: t.driftAlarmDegCPer30Days * (1 - r),
    coverageAlarmFraction: Math.min(1, t.coverageAlarmFraction * (1 + r)),
    coverageAlarmAdjacentInvalid: Math.max(1, t.coverageAlarmAdjacentInvalid - 1),
    outlierRecurringRings: Math.max(1, t.outlierRecurringRings - 1),
    missingRecurringRings: Math.max(1, t.missingRecurringRings - 1),
  };
}

const UNIT_WIDE: ReadonlySet<string> = new Set(['spread_high', 'spread_jump', 'coverage_degraded', 'unit_silent']);

/** The condition key of a finding or alert: the kind, and its chamber or thermocouple unless the kind is unit-wide. */
export function conditionKey(kind: string, chamber: number | null, thermocouple: number | null): string {
  if (UNIT_WIDE.has(kind)) return kind;
  if (thermocouple !== null && chamber === null) return `${kind}:tc${thermocouple}`;
  if (chamber !== null && thermocouple === null) return `${kind}:ch${chamber}`;
  return `${kind}:ch${chamber ?? '-'}:tc${thermocouple ?? '-'}`;
}

const lower = (a: Grade, b: Grade): Grade => (gradeRank(a) <= gradeRank(b) ? a : b);
const higher = (a: Grade, b: Grade): Grade => (gradeRank(a) >= gradeRank(b) ? a : b);

/** Findings of one observation by condition key; the most severe when a key appears twice. */
function byKey(findings: readonly Finding[]): Map<string, Finding> {
  const m = new Map<string, Finding>();
  for (const f of findings) {
    if (!GRADES.includes(f.grade)) continue;
    const k = conditionKey(f.kind, f.chamber, f.thermocouple);
    const had = m.get(k);
    if (!had || gradeRank(f.grade) > gradeRank(had.grade)) m.set(k, f);
  }
  return m;
}

/** What an alert says about its condition: a core finding, or the same shape for unit_silent. */
export type AlertSubject = Omit<Finding, 'kind'> & { kind: AlertKind };

function evidenceOf(f: AlertSubject): Record<string, unknown> {
  return { ...f.evidence };
}

/** Copies what a finding says (text, subject, evidence) onto the alert; not a state change. */
export function describe(a: AlertRow, f: AlertSubject): void {
  a.message = f.message;
  a.advice = f.advice;
  a.evidence = evidenceOf(f);
  a.chamber = f.chamber;
  a.thermocouple = f.thermocouple;
  a.likelihood = f.likelihood;
  a.runnerUpChamber = f.runnerUpChamber;
  a.runnerUpLikelihood = f.runnerUpLikelihood;
  a.baselineVersion = f.baselineVersion;
}

/** A new active alert (not yet stored) for condition `key`, raised at `at`; `fromHistory`: raised while analysing history. */
export function newAlert(unitId: string, key: string, f: AlertSubject, grade: Grade, at: Date, fromHistory = false): AlertRow {
  const a: AlertRow = {
    id: '',
    unitId,
    kind: f.kind,
    conditionKey: key,
    grade,
    chamber: f.chamber,
    thermocouple: f.thermocouple,
    active: true,
    acknowledged: false,
    ackedAt: null,
    ackedBy: null,
    ackComment: null,
    shelvedUntil: null,
    shelvedAt: null,
    shelvedBy: null,
    shelveReason: null,
    raisedAt: at,
    lastChangedAt: at,
    clearedAt: null,
    closedAt: null,
    message: f.message,
    advice: f.advice,
    evidence: {},
    likelihood: null,
    runnerUpChamber: null,
    runnerUpLikelihood: null,
    baselineVersion: null,
    lastSeenAt: at,
    absentSince: null,
    pendingGrade: null,
    pendingGradeSince: null,
    foundInHistory: fromHistory,
    historyAnnounced: false,
  };
  describe(a, f);
  return a;
}

export interface AlertObservation {
  /** Ring time of the observation. */
  ts: Date;
  /** Findings at the normal thresholds. */
  raise: Finding[];
  /** Findings at the thresholds relaxed by the deadband (deadbandThresholds). */
  hold: Finding[];
}

/** How a batch of observations is applied. */
export interface ApplyOptions {
  /** The observations are history (a backlog, an import, a re-analysis): alerts raised are marked found in history. */
  history?: boolean;
  /** Kinds left as they are: their findings are ignored, their pending conditions and open alerts untouched (a re-analysis leaves start findings and the silent-unit check alone). */
  leaveKinds?: readonly string[];
  /**
   * The observations judge stored rings again (a re-analysis): a condition raised again takes up
   * the alert a rewind set aside for it, under that alert's id (takeUpSetAside).
   */
  rerun?: boolean;
}

/**
 * Applies a unit's observations, in time order, to its alerts, inside the caller's transaction.
 * Every state change writes the alert row, one history row and the outbox rows in that
 * transaction. Returns the changes in the order they happened; `after.idle` tells whether the
 * unit is left with no condition pending and no alert active.
 */
export async function applyAlertObservations(
  client: Queryable,
  unitId: string,
  observations: ReadonlyArray<AlertObservation>,
  settings: AlertSettings,
  after?: { idle: boolean },
  opts: ApplyOptions = {},
): Promise<AlertChange[]> {
  if (observations.length === 0) return [];
  const watermark = await lockAlertUnitState(client, unitId);
  const leave = new Set(opts.leaveKinds ?? []);
  const kept = (f: Finding) => !leave.has(f.kind);
  const fresh = observations
    .filter((o) => watermark === null || o.ts.getTime() > watermark.getTime())
    .map((o) => (leave.size ? { ts: o.ts, raise: o.raise.filter(kept), hold: o.hold.filter(kept) } : o))
    .sort((x, y) => x.ts.getTime() - y.ts.getTime());
  if (fresh.length === 0) return [];

  const pending = new Map<string, PendingCondition>();
  for (const p of await loadPending(client, unitId)) if (!leave.has(p.kind)) pending.set(p.conditionKey, p);
  const open = new Map<string, AlertRow>();
  for (const a of await loadOpenRuleAlertsForUpdate(client, unitId)) if (!leave.has(a.kind)) open.set(a.conditionKey, a);
  const pendingTouched = new Set<string>();
  const alertsTouched = new Set<AlertRow>();
  const changes: AlertChange[] = [];
  const wallNow = new Date();
  const notify = (a: AlertRow) => !isShelved(a, wallNow);
  const maxGapMs = settings.maxGapS * 1000;
  const gradeDelayMs = settings.gradeDelayS * 1000;

  let activeCount = 0;
  for (const a of open.values()) if (a.active) activeCount++;
  // Latest finding holding each active alert; copied onto the row before it is written.
  const latest = new Map<AlertRow, AlertSubject>();
  const describeLatest = (a: AlertRow) => {
    const f = latest.get(a);
    if (f) {
      describe(a, f);
      latest.delete(a);
    }
  };
  const NONE: ReadonlySet<string> = new Set();

  for (const o of fresh) {
    // Nothing found, nothing waiting, nothing active: nothing can change (the common healthy ring).
    if (o.raise.length === 0 && o.hold.length === 0 && pending.size === 0 && activeCount === 0) continue;
    const t = o.ts.getTime();
    const raise = byKey(o.raise);
    const hold = byKey(o.hold);
    for (const [k, f] of raise) {
      const h = hold.get(k);
      if (!h || gradeRank(h.grade) < gradeRank(f.grade)) hold.set(k, f);
    }

    // An on-delay in progress ends when its condition leaves the raise level.
    for (const k of pending.keys()) {
      if (!raise.has(k)) {
        pending.delete(k);
        pendingTouched.add(k);
      }
    }

    // Raise level: start or continue the on-delay; raise (or reactivate) when it has run out.
    let justChanged: Set<string> | null = null;
    for (const [k, f] of raise) {
      if (f.kind === ('unit_silent' as string)) continue;
      const a = open.get(k);
      if (a && a.active) {
        if (pending.delete(k)) pendingTouched.add(k);
        continue;
      }
      let p = pending.get(k);
      if (p && t - p.lastSeen.getTime() > maxGapMs) p = undefined;
      if (!p) {
        p = { conditionKey: k, kind: f.kind, since: o.ts, lastSeen: o.ts, grade: f.grade, finding: f as unknown as Record<string, unknown> };
        pending.set(k, p);
      } else {
        p.grade = lower(p.grade, f.grade);
        p.lastSeen = o.ts;
        p.finding = f as unknown as Record<string, unknown>;
      }
      pendingTouched.add(k);
      if (t - p.since.getTime() < settings.onDelayS[f.kind] * 1000) continue;
      pending.delete(k);
      const details = { conditionSince: p.since.toISOString() };
      if (a) {
        // Returned to normal but not yet acknowledged: the same alert becomes active again.
        const from = a.grade;
        a.active = true;
        a.grade = p.grade;
        a.clearedAt = null;
        a.absentSince = null;
        a.lastSeenAt = o.ts;
        a.lastChangedAt = o.ts;
        a.pendingGrade = null;
        a.pendingGradeSince = null;
        latest.delete(a);
        describe(a, f);
        changes.push(await recordChange(client, a, { action: 'reactivated', at: o.ts, fromGrade: from, details, notify: notify(a) }, false));
        alertsTouched.delete(a);
      } else {
        const created = newAlert(unitId, k, f, p.grade, o.ts, opts.history === true);
        const before = opts.rerun ? await takeUpSetAside(client, unitId, k) : null;
        if (before) {
          // Subscribers heard of this alert, or people acted on it, before the rings were judged
          // again: it keeps its id, acknowledgement and shelf. If subscribers believe it active, it
          // is not announced a second time (only a grade they have not heard is); if they heard it
          // clear, it is history again, announced once if still active at the end.
          created.id = before.id;
          Object.assign(created, before.people);
          created.acknowledged = before.people.ackedAt !== null;
          created.historyAnnounced = before.open;
          created.foundInHistory = created.foundInHistory || !before.open;
          changes.push(await recordChange(client, created, { action: 'raised', at: o.ts, details, notify: !before.open }, false));
          // Taken up at another grade than the one subscribers heard: they hear of the grade change, not a second raise.
          if (before.open && before.grade !== created.grade) {
            const up = gradeRank(created.grade) > gradeRank(before.grade as Grade);
            // As a live escalation does, a higher grade asks for a new acknowledgement.
            const wasAcknowledged = created.acknowledged;
            if (up) Object.assign(created, { acknowledged: false, ackedAt: null, ackedBy: null, ackComment: null });
            changes.push(await recordChange(client, created, { action: up ? 'escalated' : 'deescalated', at: o.ts, fromGrade: before.grade as Grade, details: { ...details, acknowledgementCleared: up && wasAcknowledged } }, false));
          }
        } else {
          changes.push(await recordChange(client, created, { action: 'raised', at: o.ts, details }, true));
        }
        open.set(k, created);
      }
      activeCount++;
      (justChanged ??= new Set()).add(k);
    }

    // Hold level: keep active alerts, move their grades, return them to normal after the off-delay.
    const skip = justChanged ?? NONE;
    for (const a of open.values()) {
      if (!a.active || skip.has(a.conditionKey)) continue;
      const k = a.conditionKey;
      const h = hold.get(k);
      alertsTouched.add(a);
      if (h) {
        const r = raise.get(k);
        a.absentSince = null;
        a.lastSeenAt = o.ts;
        latest.set(a, r ?? h);
        const change = considerGrade(a, r ? r.grade : null, h.grade, o.ts, gradeDelayMs, notify(a));
        if (change) {
          describeLatest(a);
          if (change.action === 'escalated' && change.notify === false && gradeRank(a.grade) >= gradeRank(UNSHELVE_AT)) {
            // Shelving (ISA-18.2) suppresses the alarm as it was when it was shelved; a rise to
            // alarm or critical is news, so the shelf ends (recorded) and the rise is announced.
            const until = a.shelvedUntil!.toISOString();
            a.shelvedUntil = null;
            changes.push(await recordChange(client, a, { action: 'unshelved', at: o.ts, fromGrade: change.fromGrade, details: { until, cause: 'escalated while shelved', toGrade: a.grade }, notify: false }, false));
            change.notify = true;
          }
          changes.push(await recordChange(client, a, change, false));
          alertsTouched.delete(a);
        }
        continue;
      }
      if (!a.absentSince) a.absentSince = o.ts;
      a.pendingGrade = null;
      a.pendingGradeSince = null;
      if (t - a.absentSince.getTime() < settings.offDelayS[a.kind] * 1000) continue;
      const endedAt = a.absentSince;
      a.active = false;
      activeCount--;
      a.clearedAt = o.ts;
      a.lastChangedAt = o.ts;
      a.absentSince = null;
      const closes = a.acknowledged;
      const announce = notify(a);
      if (closes) {
        closeAlert(a, o.ts);
        open.delete(k);
      }
      describeLatest(a);
      changes.push(await recordChange(client, a, { action: 'returned_to_normal', at: o.ts, details: { conditionEndedAt: endedAt.toISOString(), closed: closes }, notify: announce }, false));
      alertsTouched.delete(a);
    }
  }

  // Bookkeeping that is not a state change: evidence, last seen, off-delay and grade timers.
  for (const a of alertsTouched) {
    describeLatest(a);
    await saveAlert(client, a);
  }
  const upserts: PendingCondition[] = [];
  const removed: string[] = [];
  for (const k of pendingTouched) {
    const p = pending.get(k);
    if (p) upserts.push(p);
    else removed.push(k);
  }
  await savePending(client, unitId, upserts, removed);
  await setAlertWatermark(client, unitId, fresh[fresh.length - 1].ts);
  if (after) after.idle = pending.size === 0 && activeCount === 0;
  return changes;
}

/**
 * Moves an active alert's grade. `raiseGrade` is its grade at the normal thresholds (null when
 * only the hold level finds it), `holdGrade` at the relaxed ones. Returns the change to record
 * when the grade moved (the row is already updated).
 */
function considerGrade(
  a: AlertRow,
  raiseGrade: Grade | null,
  holdGrade: Grade,
  at: Date,
  delayMs: number,
  notify: boolean,
): ChangeInput | null {
  const g = a.grade;
  let candidate: Grade | null = null;
  if (raiseGrade && gradeRank(raiseGrade) > gradeRank(g)) candidate = raiseGrade;
  else if (gradeRank(holdGrade) < gradeRank(g)) candidate = holdGrade;
  if (!candidate) {
    a.pendingGrade = null;
    a.pendingGradeSince = null;
    return null;
  }
  const up = gradeRank(candidate) > gradeRank(g);
  if (a.pendingGrade && a.pendingGradeSince && gradeRank(a.pendingGrade) > gradeRank(g) === up) {
    a.pendingGrade = up ? lower(a.pendingGrade, candidate) : higher(a.pendingGrade, candidate);
  } else {
    a.pendingGrade = candidate;
    a.pendingGradeSince = at;
  }
  if (at.getTime() - a.pendingGradeSince!.getTime() < delayMs) return null;
  const next = a.pendingGrade;
  const since = a.pendingGradeSince!;
  a.grade = next;
  a.pendingGrade = null;
  a.pendingGradeSince = null;
  a.lastChangedAt = at;
  const wasAcknowledged = a.acknowledged;
  if (up) {
    a.acknowledged = false;
    a.ackedAt = null;
    a.ackedBy = null;
    a.ackComment = null;
  }
  return { action: up ? 'escalated' : 'deescalated', at, fromGrade: g, details: { gradeSince: since.toISOString(), acknowledgementCleared: up && wasAcknowledged }, notify };
}
