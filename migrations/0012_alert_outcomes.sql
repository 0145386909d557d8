-- What an inspection found after a chamber or thermocouple alert: the only field measure of
-- the monitor's precision, kept beside the alert that led to it. One outcome per alert; a
-- later record replaces it (the row keeps who recorded it last and when). inspected_at is
-- when the chamber or probe was looked at (the outage), given by the person recording it;
-- recorded_at is wall-clock time.
CREATE TABLE alert_outcomes (
  alert_id      uuid NOT NULL REFERENCES alerts (id) ON DELETE CASCADE,
  unit_id       text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  outcome       text NOT NULL CHECK (outcome IN ('confirmed', 'not_found', 'not_inspected')),
  -- what was found (confirmed) or what was looked at (not found); free text
  found         text,
  inspected_at  timestamptz,
  recorded_by   text NOT NULL,
  key_id        text,
  recorded_at   timestamptz NOT NULL DEFAULT now(),
  PRIMARY KEY (unit_id, alert_id),
  CHECK (outcome = 'not_inspected' OR inspected_at IS NOT NULL)
);
