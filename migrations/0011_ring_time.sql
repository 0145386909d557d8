-- One timeline per unit, in ring time.
--
-- A baseline judges the rings from its effective time on (the end of its window): the one in
-- force at a ring's time is the highest version whose effective time is at or before it. A new
-- version (or a configuration version) that takes effect before the analysis watermark asks for
-- the rings after that time to be judged again: reanalyse_from is the earliest such time, and
-- while the rings up to reanalysis_to (the watermark when it began) are judged again,
-- reanalysis_from says where it began.
ALTER TABLE baselines ADD COLUMN effective_from timestamptz;
UPDATE baselines SET effective_from = window_to;
ALTER TABLE baselines ALTER COLUMN effective_from SET NOT NULL;

ALTER TABLE analysis_progress
  ADD COLUMN reanalyse_from timestamptz,
  ADD COLUMN reanalysis_from timestamptz,
  ADD COLUMN reanalysis_to timestamptz;

-- The alert rules' state of a unit as it stood at the start of a ring-time day (its first ring
-- of the day not yet applied): what a re-analysis from that day starts from. Rule-made state
-- only; start findings and the silent-unit check are not re-run.
CREATE TABLE alert_state_marks (
  unit_id       text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  at_ts         timestamptz NOT NULL,
  evaluated_to  timestamptz,
  pending       jsonb NOT NULL,
  open_alerts   jsonb NOT NULL,
  PRIMARY KEY (unit_id, at_ts)
);

-- Alerts found while analysing history (a backlog, an import, a re-analysis): recorded, but
-- announced to webhooks only once the unit has caught up, and then only if still active (or to
-- subscriptions that ask for history).
ALTER TABLE alerts
  ADD COLUMN found_in_history boolean NOT NULL DEFAULT false,
  ADD COLUMN history_announced boolean NOT NULL DEFAULT false;
ALTER TABLE webhooks ADD COLUMN include_history boolean NOT NULL DEFAULT false;
CREATE INDEX alerts_history_unannounced ON alerts (unit_id) WHERE found_in_history AND NOT history_announced;

-- An alert a person has acted on is kept when a re-analysis no longer raises it at that time:
-- it is closed with a 'withdrawn' history row.
ALTER TABLE alert_history DROP CONSTRAINT alert_history_action_check;
ALTER TABLE alert_history ADD CONSTRAINT alert_history_action_check CHECK (action IN ('raised', 'reactivated', 'escalated', 'deescalated', 'returned_to_normal',
  'acknowledged', 'shelved', 'unshelved', 'shelf_expired', 'withdrawn'));
