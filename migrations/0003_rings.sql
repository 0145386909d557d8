-- The ring table: one exhaust ring (all thermocouples at one instant) with its operating point.
-- Range-partitioned by month on ts; primary key (unit_id, ts) makes a re-sent ring a no-op.
-- Readings are °C, in thermocouple order (index 0 = thermocouple 1), NULL where missing.
CREATE TABLE rings (
  unit_id          text NOT NULL,
  ts               timestamptz NOT NULL,
  load_mw          real NOT NULL,
  ambient_c        real NOT NULL,
  ambient_kpa      real NOT NULL,
  speed_pct        real NOT NULL,
  cdt_c            real,
  cdp_kpa          real,
  fuel_flow_kg_s   real,
  flame_detected   boolean,
  exhaust_c        real[] NOT NULL,
  received_at      timestamptz NOT NULL DEFAULT now(),
  PRIMARY KEY (unit_id, ts)
) PARTITION BY RANGE (ts);

-- Creates the monthly partitions <parent>_YYYY_MM of a table partitioned by range on a
-- timestamptz, covering [from_ts, to_ts]; safe to call concurrently. Returns how many it made.
CREATE FUNCTION ensure_monthly_partitions(parent text, from_ts timestamptz, to_ts timestamptz) RETURNS integer
LANGUAGE plpgsql AS $$
DECLARE
  m timestamptz := date_trunc('month', from_ts AT TIME ZONE 'UTC') AT TIME ZONE 'UTC';
  last_m timestamptz := date_trunc('month', to_ts AT TIME ZONE 'UTC') AT TIME ZONE 'UTC';
  part text;
  made integer := 0;
BEGIN
  IF from_ts > to_ts THEN
    RAISE EXCEPTION 'ensure_monthly_partitions(%): from % is after to %', parent, from_ts, to_ts;
  END IF;
  WHILE m <= last_m LOOP
    part := parent || '_' || to_char(m AT TIME ZONE 'UTC', 'YYYY_MM');
    IF to_regclass(part) IS NULL THEN
      -- Serialise creators of the same month; one that lost the race finds the table made.
      PERFORM pg_advisory_xact_lock(hashtext(part));
      BEGIN
        -- CREATE then ATTACH: attaching takes a lock that lets other writers and readers of
        -- the parent carry on (CREATE … PARTITION OF would block them).
        EXECUTE format('CREATE TABLE %I (LIKE %I INCLUDING DEFAULTS INCLUDING CONSTRAINTS)', part, parent);
        EXECUTE format('ALTER TABLE %I ATTACH PARTITION %I FOR VALUES FROM (%L) TO (%L)',
                       parent, part, m, m + interval '1 month');
        made := made + 1;
      EXCEPTION WHEN duplicate_table OR unique_violation THEN
        NULL;
      END;
    END IF;
    m := m + interval '1 month';
  END LOOP;
  RETURN made;
END $$;

CREATE FUNCTION ensure_ring_partitions(from_ts timestamptz, to_ts timestamptz) RETURNS integer
LANGUAGE sql AS $$ SELECT ensure_monthly_partitions('rings', from_ts, to_ts) $$;

-- Ahead of time: the last year and the next three months.
SELECT ensure_ring_partitions(now() - interval '12 months', now() + interval '3 months');
