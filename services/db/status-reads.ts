/**
 * What GET /v1/units/:unitId/status reads, in one statement for one unit or many: the unit, its latest analysed ring,
 * how far analysis has come, its active alerts (not shelved), its start counters, the commit
 * snapshot the row was read at (see commitSnapshot in reads.ts), and the next instant at which
 * the clock alone changes the answer (a shelf running out). The same fields as latestAnalysis,
 * analysisProgress, listActiveAlerts and the starts repository's counters give, so the route
 * shows exactly what those would.
 */
import type pg from 'pg';
import { GRADES, type Grade } from '../core/findings.ts';
import type { AlertKind } from './config.ts';
import { alertFromDb, toAlertJson, type AlertJson } from './alert-rows.ts';
import { BASELINE_OUTLOOK_COLUMNS, baselineOutlookOf, type BaselineOutlook } from './baselines.ts';
import type { AnalysisProgressInfo } from './progress.ts';
import type { LatestAnalysis } from './analysis.ts';
import type { StartCountersRecord } from './starts.ts';

type Queryable = pg.Pool | pg.ClientBase;

export interface UnitStatusState {
  analysis: LatestAnalysis | null;
  progress: AnalysisProgressInfo;
  /** Active alerts not shelved at the time asked, worst grade first, then newest. */
  alerts: AlertJson[];
  starts: Omit<StartCountersRecord, 'unitId'>;
  snapshot: string;
  /** How the unit's baseline stands (for what is not judged yet). */
  baseline: BaselineOutlook;
  /** When the first shelf on an active alert runs out (the alert list changes then), or null. */
  changesAtMs: number | null;
}

// Columns of the latest analysis carry an `a_` prefix: alerts have columns of the same names.
const STATUS_SQL = `
SELECT u.id AS s_unit_id, pg_current_snapshot()::text AS snap,
       (SELECT max(ts) FROM rings WHERE unit_id = u.id) AS last_ring_ts,
       (SELECT count(*) FROM rings WHERE unit_id = u.id AND ts > coalesce(p.watermark_ts, '-infinity'))::bigint AS pending,
       p.watermark_ts, p.rings_analysed, p.late_rings_analysed, c.worker_id, c.lease_until,
       st.fired_starts, st.failed_starts, st.trips, st.fired_seconds, ls.crank_at AS last_start_at, ls.outcome AS last_start_outcome,
       (SELECT min(shelved_until) FROM alerts WHERE unit_id = u.id AND active AND shelved_until > $2) AS unshelve_at,${BASELINE_OUTLOOK_COLUMNS},
       ra.ts AS a_ts, ra.config_version AS a_config_version, ra.baseline_version AS a_baseline_version, ra.load_fraction AS a_load_fraction,
       ra.steady AS a_steady, ra.spread AS a_spread, ra.spread_excl1 AS a_spread_excl1, ra.spread_excl2 AS a_spread_excl2,
       ra.spread_limit AS a_spread_limit, ra.limit_from_baseline AS a_limit_from_baseline, ra.ring_mean AS a_ring_mean,
       ra.hottest_tc AS a_hottest_tc, ra.coldest_tc AS a_coldest_tc, ra.second_coldest_tc AS a_second_coldest_tc,
       ra.coldest_adjacent AS a_coldest_adjacent, ra.valid_count AS a_valid_count, ra.coverage_degraded AS a_coverage_degraded,
       ra.validity AS a_validity, ra.swirl_deg AS a_swirl_deg, ra.chamber_deviation AS a_chamber_deviation,
       ra.chamber_uncertainty AS a_chamber_uncertainty, ra.chamber_residual AS a_chamber_residual, ra.worst_chamber AS a_worst_chamber,
       ra.worst_likelihood AS a_worst_likelihood, ra.runner_up_chamber AS a_runner_up_chamber, ra.runner_up_likelihood AS a_runner_up_likelihood,
       ra.findings AS a_findings,
       al.id, al.unit_id, al.kind, al.condition_key, al.grade, al.chamber, al.thermocouple, al.active, al.acknowledged, al.acked_at, al.acked_by,
       al.ack_comment, al.shelved_until, al.shelved_at, al.shelved_by, al.shelve_reason, al.raised_at, al.last_changed_at, al.cleared_at,
       al.closed_at, al.message, al.advice, al.evidence, al.likelihood, al.runner_up_chamber, al.runner_up_likelihood, al.baseline_version,
       al.last_seen_at, al.absent_since, al.pending_grade, al.pending_grade_since, al.found_in_history, al.history_announced,
       p.reanalyse_from, p.reanalysis_from, p.reanalysis_to,
       (SELECT count(*) FROM rings WHERE unit_id = u.id AND p.reanalysis_to IS NOT NULL AND ts > coalesce(p.watermark_ts, '-infinity') AND ts <= p.reanalysis_to)::bigint AS reanalysis_left
  FROM units u
  LEFT JOIN analysis_progress p ON p.unit_id = u.id
  LEFT JOIN unit_claims c ON c.unit_id = u.id
  LEFT JOIN start_state st ON st.unit_id = u.id
  LEFT JOIN LATERAL (SELECT crank_at, outcome FROM starts WHERE unit_id = u.id ORDER BY crank_at DESC LIMIT 1) ls ON true
  -- The latest in-order ring analysed is at the watermark (late rings are older): one partition,
  -- one index probe; only without a row there is the newest row searched for.
  LEFT JOIN LATERAL ((SELECT * FROM ring_analysis WHERE unit_id = u.id AND ts = p.watermark_ts)
                     UNION ALL
                     (SELECT * FROM ring_analysis WHERE unit_id = u.id ORDER BY ts DESC LIMIT 1)
                     LIMIT 1) ra ON true
  LEFT JOIN alerts al ON al.unit_id = u.id AND al.active AND (al.shelved_until IS NULL OR al.shelved_until <= $2)
 WHERE u.id = ANY($1::text[])
 ORDER BY u.id, array_position($3::text[], al.grade) DESC, al.raised_at DESC, al.id DESC`;

const n = (v: unknown) => (v === null || v === undefined ? null : Number(v));
const date = (v: unknown): Date | null => (v === null || v === undefined ? null : v instanceof Date ? v : new Date(String(v)));
const iso = (v: unknown): string | null => (v instanceof Date ? v.toISOString() : v == null ? null : String(v));

function analysisOf(r: Record<string, unknown>): LatestAnalysis | null {
  if (r.a_ts === null || r.a_ts === undefined) return null;
  return {
    ts: r.a_ts as Date,
    configVersion: r.a_config_version as number,
    baselineVersion: r.a_baseline_version as number | null,
    loadFraction: n(r.a_load_fraction),
    steady: r.a_steady as boolean,
    spread: n(r.a_spread),
    spreadExcl1: n(r.a_spread_excl1),
    spreadExcl2: n(r.a_spread_excl2),
    spreadLimit: n(r.a_spread_limit),
    limitFromBaseline: r.a_limit_from_baseline as boolean,
    ringMean: n(r.a_ring_mean),
    hottestTc: r.a_hottest_tc as number | null,
    coldestTc: r.a_coldest_tc as number | null,
    secondColdestTc: r.a_second_coldest_tc as number | null,
    coldestAdjacent: r.a_coldest_adjacent as boolean,
    validCount: r.a_valid_count as number,
    coverageDegraded: r.a_coverage_degraded as boolean,
    validity: r.a_validity as number[],
    swirlDeg: n(r.a_swirl_deg),
    chamberDeviation: r.a_chamber_deviation as (number | null)[],
    chamberUncertainty: r.a_chamber_uncertainty as (number | null)[],
    chamberResidual: r.a_chamber_residual as (number | null)[] | null,
    worstChamber: r.a_worst_chamber as number | null,
    worstLikelihood: n(r.a_worst_likelihood),
    runnerUpChamber: r.a_runner_up_chamber as number | null,
    runnerUpLikelihood: n(r.a_runner_up_likelihood),
    findings: r.a_findings,
  };
}

/**
 * The status of each of `unitIds` at instant `nowMs` (shelves are judged against it), by unit;
 * a unit that does not exist is missing from the map. One named statement for any number of
 * units: planned once per connection, pruned at execution.
 */
export async function unitStatusStates(q: Queryable, unitIds: readonly string[], nowMs: number): Promise<Map<string, UnitStatusState>> {
  const { rows } = await q.query({ name: 'unit_status_states', text: STATUS_SQL, values: [unitIds, new Date(nowMs), GRADES] });
  const states = new Map<string, UnitStatusState>();
  // Rows come grouped by unit: one per active alert, or one with null alert columns.
  for (let i = 0; i < rows.length; ) {
    let j = i + 1;
    while (j < rows.length && rows[j].s_unit_id === rows[i].s_unit_id) j++;
    states.set(rows[i].s_unit_id as string, stateOf(rows.slice(i, j)));
    i = j;
  }
  return states;
}

/** The status of one unit at instant `nowMs`, or null when there is no such unit. */
export async function unitStatusState(q: Queryable, unitId: string, nowMs: number): Promise<UnitStatusState | null> {
  return (await unitStatusStates(q, [unitId], nowMs)).get(unitId) ?? null;
}

function stateOf(rows: pg.QueryResultRow[]): UnitStatusState {
  const r = rows[0];
  const lease = r.lease_until;
  const leaseOk = lease instanceof Date && Number.isFinite(lease.getTime());
  const analysed = Number(r.rings_analysed ?? 0) + Number(r.late_rings_analysed ?? 0);
  const unshelveAt = date(r.unshelve_at);
  return {
    analysis: analysisOf(r),
    progress: {
      lastRingTs: (r.last_ring_ts as Date | null) ?? null,
      ringsStored: analysed + Number(r.pending),
      ringsAnalysed: analysed,
      watermarkTs: (r.watermark_ts as Date | null) ?? null,
      ringsAnalysedInOrder: Number(r.rings_analysed ?? 0),
      lateRingsAnalysed: Number(r.late_rings_analysed ?? 0),
      workerId: (r.worker_id as string | null) ?? null,
      leaseUntil: leaseOk ? lease : null,
      reanalysis:
        r.reanalysis_to || r.reanalyse_from
          ? { fromTs: date(r.reanalysis_from), toTs: date(r.reanalysis_to), ringsLeft: Number(r.reanalysis_left ?? 0), askedFromTs: date(r.reanalyse_from) }
          : null,
    },
    alerts: rows.filter((a) => a.id !== null).map((a) => toAlertJson(alertFromDb(a))),
    starts: {
      firedStarts: Number(r.fired_starts ?? 0),
      failedStarts: Number(r.failed_starts ?? 0),
      trips: Number(r.trips ?? 0),
      firedHours: Math.round((Number(r.fired_seconds ?? 0) / 3600) * 100) / 100,
      lastStartAt: iso(r.last_start_at),
      lastStartOutcome: (r.last_start_outcome as StartCountersRecord['lastStartOutcome']) ?? null,
    },
    baseline: baselineOutlookOf(r),
    snapshot: r.snap as string,
    changesAtMs: unshelveAt && Number.isFinite(unshelveAt.getTime()) ? unshelveAt.getTime() : null,
  };
}
