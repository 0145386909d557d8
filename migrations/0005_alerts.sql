-- Alerts with the ISA-18.2 / IEC 62682 life cycle, their history, the on-delay state of
-- conditions not yet raised, webhook subscriptions, the webhook outbox and its delivery log.
--
-- A condition is identified by (unit_id, condition_key); the key is written by the worker
-- (kind, and the chamber or thermocouple where that is the subject of the kind). At most one
-- alert per condition is open: an alert is open until it has returned to normal AND been
-- acknowledged (closed_at set). Rule-driven times (raised_at, cleared_at, and the on-/off-delay
-- bookkeeping) are ring time; times of people's actions are wall-clock time.

CREATE TABLE alerts (
  id                    uuid PRIMARY KEY DEFAULT gen_random_uuid(),
  unit_id               text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  kind                  text NOT NULL CHECK (kind IN ('thermocouple_fault', 'coverage_degraded', 'spread_high', 'spread_jump',
                                                      'chamber_cold', 'chamber_hot', 'chamber_drift', 'unit_silent')),
  condition_key         text NOT NULL,
  grade                 text NOT NULL CHECK (grade IN ('notice', 'warning', 'alarm', 'critical')),
  -- numbered from 1; null when the kind has no chamber or thermocouple
  chamber               integer CHECK (chamber >= 1),
  thermocouple          integer CHECK (thermocouple >= 1),
  active                boolean NOT NULL,
  acknowledged          boolean NOT NULL DEFAULT false,
  acked_at              timestamptz,
  acked_by              text,
  ack_comment           text,
  shelved_until         timestamptz,
  shelved_at            timestamptz,
  shelved_by            text,
  shelve_reason         text,
  raised_at             timestamptz NOT NULL,
  last_changed_at       timestamptz NOT NULL,
  -- when it last returned to normal; null while active
  cleared_at            timestamptz,
  -- returned to normal and acknowledged: no longer open
  closed_at             timestamptz,
  message               text NOT NULL,
  advice                text NOT NULL,
  evidence              jsonb NOT NULL DEFAULT '{}',
  likelihood            double precision,
  runner_up_chamber     integer,
  runner_up_likelihood  double precision,
  baseline_version      integer,
  -- rule bookkeeping (ring time): last observation holding the condition, first observation
  -- without it (off-delay running), a grade waiting out the grade delay
  last_seen_at          timestamptz,
  absent_since          timestamptz,
  pending_grade         text CHECK (pending_grade IN ('notice', 'warning', 'alarm', 'critical')),
  pending_grade_since   timestamptz,
  created_at            timestamptz NOT NULL DEFAULT now(),
  updated_at            timestamptz NOT NULL DEFAULT now(),
  CHECK (closed_at IS NULL OR (NOT active AND acknowledged))
);

CREATE UNIQUE INDEX alerts_one_open_per_condition ON alerts (unit_id, condition_key) WHERE closed_at IS NULL;
CREATE INDEX alerts_newest ON alerts (raised_at DESC, id DESC);
CREATE INDEX alerts_unit_newest ON alerts (unit_id, raised_at DESC, id DESC);
CREATE INDEX alerts_shelved ON alerts (shelved_until) WHERE shelved_until IS NOT NULL;

-- One row per state change of an alert, written in the transaction of the change.
CREATE TABLE alert_history (
  id           bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  alert_id     uuid NOT NULL REFERENCES alerts (id) ON DELETE CASCADE,
  unit_id      text NOT NULL,
  -- ring time for rule-driven changes, wall-clock time for people's actions
  at           timestamptz NOT NULL,
  recorded_at  timestamptz NOT NULL DEFAULT now(),
  action       text NOT NULL CHECK (action IN ('raised', 'reactivated', 'escalated', 'deescalated', 'returned_to_normal',
                                               'acknowledged', 'shelved', 'unshelved', 'shelf_expired')),
  grade        text NOT NULL,
  from_grade   text,
  by           text,
  comment      text,
  details      jsonb NOT NULL DEFAULT '{}'
);
CREATE INDEX alert_history_by_alert ON alert_history (alert_id, id);

-- Conditions seen at the raise level but not yet for the whole on-delay (ring time).
CREATE TABLE alert_pending (
  unit_id        text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  condition_key  text NOT NULL,
  kind           text NOT NULL,
  since          timestamptz NOT NULL,
  last_seen      timestamptz NOT NULL,
  -- the lowest grade seen since `since`: the grade held throughout
  grade          text NOT NULL,
  finding        jsonb NOT NULL,
  PRIMARY KEY (unit_id, condition_key)
);

-- Per unit: the ring time up to which observations have been applied. Older observations
-- (late rings, a re-run range) do not move alert state again.
CREATE TABLE alert_unit_state (
  unit_id       text PRIMARY KEY REFERENCES units (id) ON DELETE CASCADE,
  evaluated_to  timestamptz
);

CREATE TABLE webhooks (
  id          uuid PRIMARY KEY DEFAULT gen_random_uuid(),
  url         text NOT NULL,
  min_grade   text NOT NULL CHECK (min_grade IN ('notice', 'warning', 'alarm', 'critical')),
  -- needed in clear to sign; never returned by the API
  secret      text NOT NULL,
  -- null: every unit
  unit_ids    text[],
  created_at  timestamptz NOT NULL DEFAULT now(),
  created_by  text,
  deleted_at  timestamptz
);

-- One row per (event, subscription), written in the transaction of the alert change. The body
-- is stored as sent so the signature covers exactly these bytes on every attempt.
CREATE TABLE webhook_outbox (
  id               bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  webhook_id       uuid NOT NULL REFERENCES webhooks (id),
  alert_id         uuid NOT NULL REFERENCES alerts (id) ON DELETE CASCADE,
  unit_id          text NOT NULL,
  history_id       bigint NOT NULL,
  event            text NOT NULL,
  body             text NOT NULL,
  state            text NOT NULL DEFAULT 'pending' CHECK (state IN ('pending', 'delivered', 'dead', 'cancelled')),
  attempts         integer NOT NULL DEFAULT 0,
  next_attempt_at  timestamptz NOT NULL DEFAULT now(),
  created_at       timestamptz NOT NULL DEFAULT now(),
  delivered_at     timestamptz,
  last_error       text
);
CREATE INDEX webhook_outbox_due ON webhook_outbox (next_attempt_at, id) WHERE state = 'pending';
CREATE INDEX webhook_outbox_by_webhook ON webhook_outbox (webhook_id, id);

-- One row per HTTP attempt.
CREATE TABLE webhook_deliveries (
  id            bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  outbox_id     bigint NOT NULL REFERENCES webhook_outbox (id) ON DELETE CASCADE,
  webhook_id    uuid NOT NULL,
  unit_id       text NOT NULL,
  attempt       integer NOT NULL,
  attempted_at  timestamptz NOT NULL,
  duration_ms   integer NOT NULL,
  status_code   integer,
  error         text,
  outcome       text NOT NULL CHECK (outcome IN ('delivered', 'retry', 'dead'))
);
CREATE INDEX webhook_deliveries_by_webhook ON webhook_deliveries (webhook_id, id DESC);
CREATE INDEX webhook_deliveries_by_outbox ON webhook_deliveries (outbox_id, id);
