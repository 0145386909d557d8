/**
 * Judging a unit's stored rings again from a ring time on (a baseline or configuration version
 * that takes effect in the past), inside the worker's transaction for the unit:
 *
 * - Marks: at the start of each ring-time day the worker passes, the alert rules' state of the
 *   unit (pending conditions, open alerts, the ring time applied up to) is kept (takeAlertMark).
 * - Rewind (rewindTo): the latest mark at or before the time asked is the point analysis goes
 *   back to. Alerts raised from then on by the ring rules are removed, but those a subscriber
 *   heard of or a person acted on are set aside (taken up again under their ids by the same
 *   condition, or withdrawn when the re-analysis ends), the rules' history rows from then on are removed, the open
 *   alerts, pending conditions and watermark of the mark are put back; rollups, daily residuals
 *   and drift states from then on are removed, and so are the starts that began from then on
 *   (the start detector's state of the mark is put back); the analysis watermark goes back to the last ring
 *   before the point. The worker then analyses the rings again in order, day by day, as it
 *   analysed them the first time; rings up to reanalysis_to are counted as re-run, not again as
 *   analysed. People's acknowledgements and shelves stay.
 *
 * Everything commits with the round or not at all, so a crash leaves either the old judgement
 * or the rewind and whatever days were judged again since, never half of one.
 */
import { KINDS_NOT_REANALYSED } from './config.ts';
import { ALERT_COLUMNS, alertFromDb, type AlertRow, type Queryable } from './alert-rows.ts';
import { recordChange } from './alert-changes.ts';
import { isoMicros } from './pg-binary.ts';
import { msOf } from './sql.ts';

const SKIP = KINDS_NOT_REANALYSED as readonly string[];

/** Keeps the unit's alert rule state as it stands now, as the state at the start of the ring-time day atMs. */
export async function takeAlertMark(c: Queryable, unitId: string, atMs: number): Promise<void> {
  await c.query(
    `INSERT INTO alert_state_marks (unit_id, at_ts, evaluated_to, pending, open_alerts, start_state)
     SELECT $1, $2::timestamptz, (SELECT evaluated_to FROM alert_unit_state WHERE unit_id = $1),
            coalesce((SELECT jsonb_agg(to_jsonb(p)) FROM alert_pending p WHERE p.unit_id = $1 AND p.kind <> ALL($3::text[])), '[]'),
            coalesce((SELECT jsonb_agg(to_jsonb(a)) FROM alerts a WHERE a.unit_id = $1 AND a.closed_at IS NULL AND a.kind <> ALL($3::text[])), '[]'),
            (SELECT to_jsonb(s) FROM start_state s WHERE s.unit_id = $1)
     ON CONFLICT (unit_id, at_ts) DO UPDATE SET evaluated_to = excluded.evaluated_to, pending = excluded.pending, open_alerts = excluded.open_alerts,
       start_state = excluded.start_state`,
    [unitId, isoMicros(atMs), SKIP],
  );
}

export interface Rewind {
  /** The ring time analysis went back to (-Infinity: the unit's first ring). */
  pointMs: number;
  /** The new watermark: the last ring before the point (null: none). */
  watermarkMs: number | null;
  /** Alerts removed, and alerts set aside because a subscriber had heard of them or a person had acted on them. */
  removedAlerts: number;
  setAsideAlerts: number;
}

/**
 * Rewinds the unit's analysis to the latest mark at or before fromMs (see the file comment).
 * The caller holds the unit (its claim row locked) and has checked reanalyse_from is set.
 */
export async function rewindTo(c: Queryable, unitId: string, fromMs: number): Promise<Rewind> {
  const mark = await c.query(
    `SELECT ${msOf('at_ts')} AS at_ms, evaluated_to, pending, open_alerts, start_state FROM alert_state_marks
      WHERE unit_id = $1 AND at_ts <= $2::timestamptz ORDER BY at_ts DESC LIMIT 1`,
    [unitId, isoMicros(fromMs)],
  );
  const m = mark.rows[0] as { at_ms: number; evaluated_to: Date | null; pending: unknown[]; open_alerts: unknown[]; start_state: Record<string, unknown> | null } | undefined;
  const pointMs = m ? Number(m.at_ms) : -Infinity;
  const point = m ? isoMicros(pointMs) : '-infinity';
  const args = [unitId, point, SKIP];

  // Alerts the rules raised from the point on. One a subscriber heard of or a person acted on is
  // set aside, to be taken up again under its id by the same condition (takeUpSetAside) or
  // withdrawn when the re-analysis ends (withdrawSetAside); the others are removed.
  const keep = `(a.pushed OR EXISTS (SELECT 1 FROM alert_history h WHERE h.alert_id = a.id AND h.by IS NOT NULL))`;
  const setAside = await c.query(
    `UPDATE alerts a SET rewound_at = now(), rewound_open = (a.closed_at IS NULL), active = false, acknowledged = true,
            cleared_at = coalesce(a.cleared_at, now()), closed_at = coalesce(a.closed_at, now()), updated_at = now()
      WHERE a.unit_id = $1 AND a.raised_at >= $2::timestamptz AND a.kind <> ALL($3::text[]) AND a.rewound_at IS NULL AND ${keep}`,
    args,
  );
  const removed = await c.query(
    `DELETE FROM alerts a WHERE a.unit_id = $1 AND a.raised_at >= $2::timestamptz AND a.kind <> ALL($3::text[]) AND a.rewound_at IS NULL AND NOT ${keep}`,
    args,
  );
  // The rules' own history rows from the point on (people's actions stay).
  await c.query(
    `DELETE FROM alert_history h USING alerts a
      WHERE h.alert_id = a.id AND a.unit_id = $1 AND a.kind <> ALL($3::text[]) AND h.unit_id = $1 AND h.at >= $2::timestamptz AND h.by IS NULL
        AND h.action IN ('raised', 'reactivated', 'escalated', 'deescalated', 'returned_to_normal')`,
    args,
  );
  // The alerts open at the mark, as the rules had them then; people's acknowledgement and shelf as they are now.
  if (m && m.open_alerts.length) {
    await c.query(
      `WITH s AS (SELECT * FROM jsonb_populate_recordset(NULL::alerts, $2::jsonb))
       UPDATE alerts a SET grade = s.grade, chamber = s.chamber, thermocouple = s.thermocouple, active = s.active,
              last_changed_at = s.last_changed_at, cleared_at = s.cleared_at, closed_at = NULL, message = s.message, advice = s.advice,
              evidence = s.evidence, likelihood = s.likelihood, runner_up_chamber = s.runner_up_chamber, runner_up_likelihood = s.runner_up_likelihood,
              baseline_version = s.baseline_version, last_seen_at = s.last_seen_at, absent_since = s.absent_since, pending_grade = s.pending_grade,
              pending_grade_since = s.pending_grade_since, updated_at = now()
         FROM s
        WHERE a.id = s.id AND a.unit_id = $1`,
      [unitId, JSON.stringify(m.open_alerts)],
    );
    // The acknowledgement as the mark had it, unless a person acknowledged since.
    await c.query(
      `UPDATE alerts a SET acknowledged = s.acknowledged, acked_at = s.acked_at, acked_by = s.acked_by, ack_comment = s.ack_comment
         FROM jsonb_populate_recordset(NULL::alerts, $2::jsonb) s
        WHERE a.id = s.id AND a.unit_id = $1 AND NOT (a.acked_at IS NOT NULL AND (s.acked_at IS NULL OR a.acked_at > s.acked_at))`,
      [unitId, JSON.stringify(m.open_alerts)],
    );
  }
  await c.query(`DELETE FROM alert_pending WHERE unit_id = $1 AND kind <> ALL($2::text[])`, [unitId, SKIP]);
  if (m && m.pending.length) {
    await c.query(
      `INSERT INTO alert_pending (unit_id, condition_key, kind, since, last_seen, grade, finding)
       SELECT $1, p.condition_key, p.kind, p.since, p.last_seen, p.grade, p.finding FROM jsonb_populate_recordset(NULL::alert_pending, $2::jsonb) p`,
      [unitId, JSON.stringify(m.pending)],
    );
  }
  await c.query(`UPDATE alert_unit_state SET evaluated_to = $2 WHERE unit_id = $1`, [unitId, m ? m.evaluated_to : null]);
  await c.query(`DELETE FROM alert_state_marks WHERE unit_id = $1 AND at_ts > $2::timestamptz`, [unitId, point]);

  // The start detector as it stood at the mark (none before the first mark), and the starts from the point on: found again.
  await c.query(`DELETE FROM starts WHERE unit_id = $1 AND crank_at >= $2::timestamptz`, [unitId, point]);
  await c.query(`DELETE FROM start_state WHERE unit_id = $1`, [unitId]);
  if (m?.start_state) {
    await c.query(`INSERT INTO start_state SELECT * FROM jsonb_populate_record(NULL::start_state, $2::jsonb || jsonb_build_object('unit_id', $1::text))`, [unitId, JSON.stringify(m.start_state)]);
  }

  // What was derived from the rings from the point on.
  await c.query(`DELETE FROM analysis_rollups WHERE unit_id = $1 AND bucket >= $2::timestamptz`, [unitId, point]);
  await c.query(`DELETE FROM drift_daily WHERE unit_id = $1 AND day >= $2::timestamptz::date`, [unitId, point]);
  await c.query(`DELETE FROM drift_state WHERE unit_id = $1`, [unitId]);

  const wm = await c.query(
    `UPDATE analysis_progress p
        SET reanalysis_to = greatest(coalesce(p.reanalysis_to, '-infinity'), p.watermark_ts),
            reanalysis_from = least(coalesce(p.reanalysis_from, 'infinity'), $2::timestamptz),
            reanalyse_from = NULL,
            watermark_ts = (SELECT max(ts) FROM rings WHERE unit_id = $1 AND ts < $2::timestamptz),
            rollups_to = coalesce((SELECT max(ts) FROM rings WHERE unit_id = $1 AND ts < $2::timestamptz), '-infinity'),
            updated_at = now()
      WHERE p.unit_id = $1
      RETURNING ${msOf('p.watermark_ts')} AS wm_ms`,
    [unitId, point],
  );
  const w = wm.rows[0]?.wm_ms;
  return { pointMs, watermarkMs: w === null || w === undefined ? null : Number(w), removedAlerts: removed.rowCount ?? 0, setAsideAlerts: setAside.rowCount ?? 0 };
}

/** What people gave an alert: its acknowledgement and shelf. */
export type PeoplesPart = Pick<AlertRow, 'ackedAt' | 'ackedBy' | 'ackComment' | 'shelvedUntil' | 'shelvedAt' | 'shelvedBy' | 'shelveReason'>;

/** What a set-aside alert brings to the alert that takes it up. */
export interface SetAsideAlert {
  id: string;
  /** It was open when set aside (its subscribers believe it active). */
  open: boolean;
  grade: string;
  people: PeoplesPart;
}

/**
 * The alert set aside by a rewind for this condition, if any (the earliest raised): taken up
 * again by the alert the re-analysis raises for it, under the set-aside alert's id, with the
 * acknowledgement and shelf people gave it. Its rule history is cleared (people's rows stay).
 */
export async function takeUpSetAside(c: Queryable, unitId: string, conditionKey: string): Promise<SetAsideAlert | null> {
  const { rows } = await c.query(
    `UPDATE alerts a SET rewound_at = NULL, rewound_open = NULL
       FROM (SELECT id, rewound_open FROM alerts WHERE unit_id = $1 AND condition_key = $2 AND rewound_at IS NOT NULL ORDER BY raised_at LIMIT 1 FOR UPDATE) o
      WHERE a.id = o.id
      RETURNING o.rewound_open AS "wasOpen", ${qualified('a')}`,
    [unitId, conditionKey],
  );
  if (rows.length === 0) return null;
  const a = alertFromDb(rows[0]);
  await c.query(`DELETE FROM alert_history WHERE alert_id = $1 AND by IS NULL AND action IN ('raised', 'reactivated', 'escalated', 'deescalated', 'returned_to_normal')`, [a.id]);
  const { ackedAt, ackedBy, ackComment, shelvedUntil, shelvedAt, shelvedBy, shelveReason } = a;
  return { id: a.id, open: rows[0].wasOpen === true, grade: a.grade, people: { ackedAt, ackedBy, ackComment, shelvedUntil, shelvedAt, shelvedBy, shelveReason } };
}

/** The alert columns, qualified by a table alias. */
const qualified = (alias: string) => ALERT_COLUMNS.split(',').map((x) => `${alias}.${x.trim()}`).join(', ');

/**
 * Ends the re-analysis of the units whose watermark has reached reanalysis_to; their set-aside
 * alerts that no condition took up again are withdrawn (told to subscribers if they were open
 * when set aside). Returns the units whose re-analysis ended.
 */
export async function finishReanalysisReached(c: Queryable, unitIds: string[], now = new Date()): Promise<string[]> {
  if (unitIds.length === 0) return [];
  const { rows } = await c.query(
    `UPDATE analysis_progress SET reanalysis_to = NULL, reanalysis_from = NULL
      WHERE unit_id = ANY($1::text[]) AND reanalysis_to IS NOT NULL AND watermark_ts >= reanalysis_to
      RETURNING unit_id`,
    [unitIds],
  );
  const ended = rows.map((r: { unit_id: string }) => r.unit_id);
  if (ended.length) await withdrawSetAside(c, ended, now);
  return ended;
}

async function withdrawSetAside(c: Queryable, unitIds: string[], now: Date): Promise<void> {
  const { rows } = await c.query(
    `UPDATE alerts a SET rewound_at = NULL, rewound_open = NULL FROM (SELECT id, rewound_open FROM alerts WHERE unit_id = ANY($1::text[]) AND rewound_at IS NOT NULL FOR UPDATE) o
      WHERE a.id = o.id RETURNING o.rewound_open AS "wasOpen", ${qualified('a')}`,
    [unitIds],
  );
  for (const r of rows) {
    const a = alertFromDb(r);
    a.active = false;
    a.clearedAt ??= now;
    a.closedAt ??= now;
    await recordChange(c, a, { action: 'withdrawn', at: now, details: { cause: 'the rings were judged again and the condition is no longer found then' }, notify: r.wasOpen === true });
  }
}
