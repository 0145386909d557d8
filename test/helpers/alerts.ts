/**
 * Builders for alert tests: hand-made findings, a synthetic ring analysis for evaluateFindings,
 * alert settings with every delay stated, and a unit registered straight through the repository.
 */
import type { Pool } from '../../services/db/pool.ts';
import { withTransaction } from '../../services/db/pool.ts';
import { createUnitsRepository } from '../../services/db/units.ts';
import { loadConfig } from '../../services/db/config.ts';
import { createRingAnalysis, type RingAnalysis } from '../../services/core/ring.ts';
import type { Finding, FindingKind, Grade } from '../../services/core/findings.ts';
import type { UnitConfig } from '../../services/core/types.ts';
import { applyAlertObservations, conditionKey, loadAlertSettings, newAlert, type AlertObservation, type AlertSettings, type AlertSubject } from '../../services/worker/alerts.ts';
import { createWebhook } from '../../services/db/webhooks.ts';
import { recordChange } from '../../services/db/alert-changes.ts';
import type { AlertRow } from '../../services/db/alert-rows.ts';

export const T0 = Date.parse('2026-03-01T10:00:00Z');
export const at = (s: number) => new Date(T0 + s * 1000);

const UNIT_CONFIG: UnitConfig = {
  ratedPowerMw: 24,
  thermocouples: { count: 18, firstAngleDeg: 10 },
  chambers: { count: 10, firstAngleDeg: 0 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
} as UnitConfig;

export async function addUnit(pool: Pool, id: string): Promise<void> {
  await createUnitsRepository(pool).create({ id, name: `Test ${id}`, site: 'Test Site' }, UNIT_CONFIG, 'test');
}

/** Settings with explicit delays (seconds) for every kind, and the given overrides. */
export function settings(o: { on?: number; off?: number; grade?: number; deadband?: number; gap?: number; silent?: number; tries?: number; base?: number; max?: number } = {}): AlertSettings {
  // The tests' receivers listen on loopback, which webhooks may reach only when allowed.
  const s = loadAlertSettings(loadConfig({ CANSIGHT_WEBHOOK_ALLOW_HOSTS: '127.0.0.1' }));
  for (const k of Object.keys(s.onDelayS) as (keyof typeof s.onDelayS)[]) {
    s.onDelayS[k] = o.on ?? 30;
    s.offDelayS[k] = o.off ?? 120;
  }
  s.gradeDelayS = o.grade ?? 10;
  s.deadbandDegC = o.deadband ?? 3;
  s.maxGapS = o.gap ?? 600;
  s.unitSilentS = o.silent ?? 900;
  s.webhooks = { ...s.webhooks, maxTries: o.tries ?? 4, backoffBaseS: o.base ?? 10, backoffMaxS: o.max ?? 3600, timeoutMs: 2000 };
  return s;
}

export function finding(kind: FindingKind, grade: Grade, subject: { chamber?: number | null; thermocouple?: number | null } = {}, evidence: Finding['evidence'] = {}): Finding {
  const chamber = subject.chamber ?? (kind.startsWith('chamber_') ? 4 : null);
  const thermocouple = subject.thermocouple ?? (kind === 'thermocouple_fault' ? 7 : null);
  return {
    kind,
    grade,
    chamber,
    thermocouple,
    likelihood: chamber ? 0.8 : null,
    runnerUpChamber: chamber ? (chamber % 10) + 1 : null,
    runnerUpLikelihood: chamber ? 0.2 : null,
    evidence,
    baselineVersion: null,
    message: `${kind} ${grade}`,
    advice: 'look at it',
  };
}

/** One observation a second from T0: findings present in both raise and hold. */
export function obs(s: number, raise: Finding[] = [], hold: Finding[] = raise): AlertObservation {
  return { ts: at(s), raise, hold };
}

/** Applies observations in their own transaction. */
export function apply(pool: Pool, unitId: string, observations: AlertObservation[], s: AlertSettings) {
  return withTransaction(pool, (c) => applyAlertObservations(c, unitId, observations, s));
}

/**
 * A ring analysis with 18 valid thermocouples, no chamber deviation and the given spread; the
 * two coldest thermocouples are neighbours, so a high spread is a combustion finding.
 */
export function ringWithSpread(spreadDegC: number): RingAnalysis {
  const a = createRingAnalysis(18, 10);
  a.loadFraction = 0.9;
  a.swirlDeg = 58;
  a.coverage = { validCount: 18, total: 18, fraction: 1, longestInvalidRun: 0, degraded: false, reason: 'ok' };
  Object.assign(a.spread, {
    spreadDegC,
    spreadExcl1DegC: spreadDegC - 1,
    spreadExcl2DegC: spreadDegC - 2,
    meanDegC: 550,
    robustCentreDegC: 551,
    stdDevDegC: spreadDegC / 4,
    hottestThermocouple: 3,
    coldestThermocouple: 9,
    secondColdestThermocouple: 10,
    thirdColdestThermocouple: 11,
    coldestAdjacent: true,
    validCount: 18,
  });
  a.chamberUncertaintyDegC.fill(1);
  a.coldestChamber = 4;
  a.hottestChamber = 1;
  return a;
}

/** A deterministic sequence in [0, 1) (a linear congruential generator). */
export function sequence(seed: number): () => number {
  let x = seed >>> 0;
  return () => {
    x = (Math.imul(x, 1664525) + 1013904223) >>> 0;
    return x / 2 ** 32;
  };
}

/** Inserts an open, active alert directly with its raised history row (fixtures for route tests). */
export async function seedAlert(pool: Pool, p: { unitId: string; kind?: FindingKind; grade?: Grade; chamber?: number | null; thermocouple?: number | null; id?: string; raisedAt?: Date }): Promise<AlertRow> {
  const kind = p.kind ?? 'chamber_cold';
  const chamber = p.chamber === undefined ? (kind.startsWith('chamber_') ? 4 : null) : p.chamber;
  const thermocouple = p.thermocouple === undefined ? (kind === 'thermocouple_fault' ? 7 : null) : p.thermocouple;
  const raisedAt = p.raisedAt ?? new Date();
  const grade = p.grade ?? 'warning';
  const subject: AlertSubject = {
    kind, grade, chamber, thermocouple, likelihood: null, runnerUpChamber: null, runnerUpLikelihood: null,
    evidence: { seeded: true }, baselineVersion: null, message: `${kind} seeded`, advice: 'look at it',
  };
  const a = newAlert(p.unitId, conditionKey(kind, chamber, thermocouple), subject, grade, raisedAt);
  if (p.id) a.id = p.id;
  await withTransaction(pool, async (c) => {
    await recordChange(c, a, { action: 'raised', at: raisedAt }, true);
  });
  return a;
}

/** Fixed ids of the auth matrix's alert (on unit auth-a) and webhook. */
export const AUTH_ALERT_ID = '6f1d2c3b-0000-4000-8000-00000000a1e7';
export const AUTH_WEBHOOK_ID = '6f1d2c3b-0000-4000-8000-0000000000e6';

/** An alert on auth-a and a webhook with the fixed ids, for the auth matrix. */
export async function seedAuthFixtures(pool: Pool): Promise<void> {
  await seedAlert(pool, { unitId: 'auth-a', id: AUTH_ALERT_ID });
  await createWebhook(pool, { id: AUTH_WEBHOOK_ID, url: 'http://127.0.0.1:9/auth', minGrade: 'alarm', secret: 'auth-matrix-secret-0000', unitIds: null, createdBy: 'test' });
}
