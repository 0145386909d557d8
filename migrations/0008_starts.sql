-- Start-up analysis: every start of a unit (phases, outcome, per-chamber lighting, crossfire
-- completion time, exhaust spreads at the end of warm-up and at full speed no load, findings and
-- a thinned time series for the start's picture), and per unit the start detector's state
-- between worker batches with the start counters a maintenance planner uses.
-- Times in phases, lighting and trace are ms since 1970 (UTC); chambers numbered from 1.

CREATE TABLE starts (
  unit_id                text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  -- stable per unit: 'start-' and the crank instant (UTC, to the second)
  start_id               text NOT NULL,
  crank_at               timestamptz NOT NULL,
  -- when the start was over: loaded, failed or stopped
  end_at                 timestamptz NOT NULL,
  outcome                text NOT NULL CHECK (outcome IN ('completed', 'failed_to_fire', 'flame_lost_in_warmup', 'aborted', 'tripped_from_load')),
  stopped_in             text CHECK (stopped_in IN ('cranking', 'firing', 'flame_established', 'warm_up', 'acceleration',
                                                    'starter_disengaged', 'full_speed_no_load', 'synchronised', 'loading')),
  -- [{ phase, startMs, durationS, speedPct }] in sequence order
  phases                 jsonb NOT NULL,
  firing_speed_pct       real,
  starter_off_speed_pct  real,
  firing_fuel_kg_s       real,
  warmup_fuel_kg_s       real,
  flame_source           text CHECK (flame_source IN ('detector', 'exhaust')),
  crossfire_complete_s   real,
  -- { swirlDeg, windowEndMs, chambers: [{ chamber, litAfterS, endDeviationDegC, endDeficitFraction }], unlitChambers, lateChambers }
  lighting               jsonb,
  spread_end_warmup_c    real,
  spread_fsnl_c          real,
  max_gap_s              real NOT NULL DEFAULT 0,
  -- the run that followed a completed start: when its flame went out and how
  run_end_at             timestamptz,
  run_ended_by           text CHECK (run_ended_by IN ('stop', 'trip')),
  findings               jsonb NOT NULL DEFAULT '[]',
  trace                  jsonb NOT NULL DEFAULT '[]',
  config_version         integer,
  detected_at            timestamptz NOT NULL DEFAULT now(),
  PRIMARY KEY (unit_id, start_id)
);

CREATE INDEX starts_unit_crank ON starts (unit_id, crank_at DESC);

CREATE TABLE start_state (
  unit_id          text PRIMARY KEY REFERENCES units (id) ON DELETE CASCADE,
  -- configuration version the state was built with (a new version starts the detector afresh)
  config_version   integer,
  -- latest ring fed to the detector
  last_ts          timestamptz,
  -- the core detector's state (plain JSON)
  state            jsonb NOT NULL,
  -- start findings still in force for the alert rules: [{ sinceMs, finding }]
  open_findings    jsonb NOT NULL DEFAULT '[]',
  fired_starts     integer NOT NULL DEFAULT 0,
  failed_starts    integer NOT NULL DEFAULT 0,
  trips            integer NOT NULL DEFAULT 0,
  fired_seconds    double precision NOT NULL DEFAULT 0,
  -- the last failure of start analysis on a batch (that batch's rings were not followed)
  last_error       text,
  last_error_at    timestamptz,
  updated_at       timestamptz NOT NULL DEFAULT now()
);

-- The alert kinds of start-up analysis.
ALTER TABLE alerts DROP CONSTRAINT alerts_kind_check;
ALTER TABLE alerts ADD CONSTRAINT alerts_kind_check CHECK (kind IN ('thermocouple_fault', 'coverage_degraded', 'spread_high', 'spread_jump',
                                                                     'chamber_cold', 'chamber_hot', 'chamber_drift', 'unit_silent',
                                                                     'chamber_unlit', 'start_failed'));
