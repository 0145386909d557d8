-- What the worker writes: per-ring analysis, hourly and daily rollups, per-unit progress and
-- leases, the batch log, baselines and drift state. The worker is the only writer of these
-- tables (baselines also by a person's refit request through the API).

-- Rings are found for late analysis by the time they were received: a BRIN index is nearly
-- free to keep up on an append-mostly table and lets "received since X" skip old blocks.
CREATE INDEX rings_received_at_brin ON rings USING brin (received_at) WITH (autosummarize = on);

-- One row per analysed ring, same key as the ring. Arrays are indexed from 1 = thermocouple 1
-- or chamber 1; NULL where a value could not be computed. Residuals are against the baseline
-- version named in the row (NULL: no baseline yet) and are kept for steady rings only.
CREATE TABLE ring_analysis (
  unit_id              text NOT NULL,
  ts                   timestamptz NOT NULL,
  config_version       integer NOT NULL,
  baseline_version     integer,
  load_fraction        real,
  steady               boolean NOT NULL,
  spread               real,
  spread_excl1         real,
  spread_excl2         real,
  spread_limit         real,
  limit_from_baseline  boolean NOT NULL,
  ring_mean            real,
  robust_centre        real,
  std_dev              real,
  hottest_tc           smallint,
  coldest_tc           smallint,
  second_coldest_tc    smallint,
  coldest_adjacent     boolean NOT NULL,
  valid_count          smallint NOT NULL,
  coverage_degraded    boolean NOT NULL,
  validity             smallint[] NOT NULL,   -- reason code per thermocouple (0 = valid)
  tc_deviation         real[] NOT NULL,       -- reading − ring centre, °C
  tc_residual          real[],                -- deviation − baseline at this load, °C
  swirl_deg            real,
  chamber_deviation    real[] NOT NULL,       -- °C from the average chamber
  chamber_uncertainty  real[] NOT NULL,
  chamber_residual     real[],
  ring_level           real,
  fit_sd               real,
  worst_chamber        smallint,
  worst_likelihood     real,
  runner_up_chamber    smallint,
  runner_up_likelihood real,
  worst_grade          smallint,              -- 0 notice … 3 critical; NULL: no finding
  findings             jsonb,                 -- [{kind, grade, chamber, thermocouple}]
  analysed_at          timestamptz NOT NULL DEFAULT now(),
  PRIMARY KEY (unit_id, ts)
) PARTITION BY RANGE (ts);

-- Monthly partitions of ring_analysis covering [from_ts, to_ts]; safe to call concurrently.
CREATE FUNCTION ensure_analysis_partitions(from_ts timestamptz, to_ts timestamptz) RETURNS integer
LANGUAGE sql AS $$ SELECT ensure_monthly_partitions('ring_analysis', from_ts, to_ts) $$;

SELECT ensure_analysis_partitions(now() - interval '12 months', now() + interval '3 months');

-- Mergeable aggregates per unit, period ('hour' | 'day') and bucket start. One row per metric;
-- each array holds one element per subject: [1] for unit metrics (spread, ring_mean, …), one
-- per chamber or per thermocouple for chamber_* and tc_* metrics. Mean = sum/n,
-- variance = (sumsq − sum²/n)/(n − 1).
CREATE TABLE analysis_rollups (
  unit_id  text NOT NULL,
  period   text NOT NULL CHECK (period IN ('hour', 'day')),
  metric   text NOT NULL,
  bucket   timestamptz NOT NULL,
  n        integer[] NOT NULL,
  sum      double precision[] NOT NULL,
  sumsq    double precision[] NOT NULL,
  min      real[] NOT NULL,
  max      real[] NOT NULL,
  PRIMARY KEY (unit_id, period, metric, bucket)
);

-- Worker processes, for the fair share of units each should hold.
CREATE TABLE workers (
  worker_id     text PRIMARY KEY,
  host          text NOT NULL,
  pid           integer NOT NULL,
  started_at    timestamptz NOT NULL DEFAULT now(),
  heartbeat_at  timestamptz NOT NULL DEFAULT now()
);

-- Which worker analyses which unit, until when. Claimed with FOR UPDATE SKIP LOCKED; a lease
-- that is not renewed expires and another worker takes the unit over.
CREATE TABLE unit_claims (
  unit_id      text PRIMARY KEY REFERENCES units (id) ON DELETE CASCADE,
  worker_id    text,
  lease_until  timestamptz NOT NULL DEFAULT '-infinity',
  claimed_at   timestamptz
);

-- How far analysis has come per unit. Advanced in the same transaction as the analysis rows.
-- late_checked_from: rings received at or after this instant are still searched for late ones.
CREATE TABLE analysis_progress (
  unit_id             text PRIMARY KEY REFERENCES units (id) ON DELETE CASCADE,
  watermark_ts        timestamptz,
  late_checked_from   timestamptz NOT NULL,
  rings_analysed      bigint NOT NULL DEFAULT 0,
  late_rings_analysed bigint NOT NULL DEFAULT 0,
  updated_at          timestamptz NOT NULL DEFAULT now()
);

-- Every committed analysis batch: who analysed which span of which unit. In-order batches of a
-- unit never overlap; their ring counts add up to the rings analysed in order.
CREATE TABLE analysis_batches (
  id            bigserial PRIMARY KEY,
  unit_id       text NOT NULL,
  worker_id     text NOT NULL,
  kind          text NOT NULL CHECK (kind IN ('in_order', 'late', 'rerun')),
  from_ts       timestamptz NOT NULL,
  to_ts         timestamptz NOT NULL,
  rings         integer NOT NULL,
  committed_at  timestamptz NOT NULL DEFAULT now()
);
CREATE INDEX analysis_batches_unit ON analysis_batches (unit_id, from_ts);

-- Versioned baselines against corrected load. A new version never changes an older one.
CREATE TABLE baselines (
  unit_id       text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  version       integer NOT NULL CHECK (version >= 1),
  window_from   timestamptz NOT NULL,
  window_to     timestamptz NOT NULL,
  method        text NOT NULL,
  fitted_at     timestamptz NOT NULL,
  fitted_by     text NOT NULL,
  sample_count  integer NOT NULL,
  body          jsonb NOT NULL,
  PRIMARY KEY (unit_id, version)
);

-- Daily robust aggregates of residuals on steady rings, per chamber and per thermocouple,
-- against one baseline version; fired_hours is the unit's fired time that day.
CREATE TABLE drift_daily (
  unit_id           text NOT NULL,
  subject           text NOT NULL CHECK (subject IN ('chamber', 'thermocouple')),
  idx               smallint NOT NULL,
  day               date NOT NULL,
  baseline_version  integer NOT NULL,
  n                 integer NOT NULL,
  median            real NOT NULL,
  mad               real NOT NULL,
  mean              real NOT NULL,
  fired_hours       real NOT NULL,
  PRIMARY KEY (unit_id, subject, idx, day)
);

-- Latest drift state per chamber and thermocouple: rate with interval, CUSUM and EWMA
-- (common mode removed), against one baseline version.
CREATE TABLE drift_state (
  unit_id           text NOT NULL,
  subject           text NOT NULL CHECK (subject IN ('chamber', 'thermocouple')),
  idx               smallint NOT NULL,
  baseline_version  integer NOT NULL,
  last_day          date NOT NULL,
  sigma             real NOT NULL,
  days              integer NOT NULL,
  rate              jsonb,
  cusum             jsonb NOT NULL,
  ewma              jsonb NOT NULL,
  last_value        real,
  updated_at        timestamptz NOT NULL DEFAULT now(),
  PRIMARY KEY (unit_id, subject, idx)
);
