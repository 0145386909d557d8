-- Units and their versioned configuration. A configuration version holds the whole unit
-- configuration (geometry, swirl curve, rated power, display temperature unit) as sent through
-- the API, and the instant it takes effect; the version in force at time t is the one with the
-- latest effective_from <= t. Version 1 takes effect from -infinity so history imports find it.
CREATE TABLE units (
  id          text PRIMARY KEY CHECK (id ~ '^[a-z0-9-]{1,40}$'),
  name        text NOT NULL,
  site        text NOT NULL,
  created_at  timestamptz NOT NULL DEFAULT now()
);

CREATE TABLE unit_config_versions (
  unit_id         text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  version         integer NOT NULL CHECK (version >= 1),
  effective_from  timestamptz NOT NULL,
  config          jsonb NOT NULL,
  created_at      timestamptz NOT NULL DEFAULT now(),
  created_by      text,
  PRIMARY KEY (unit_id, version),
  UNIQUE (unit_id, effective_from)
);
