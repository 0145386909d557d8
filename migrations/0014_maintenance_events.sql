-- Maintenance events per unit, in ring time: what people did to the machine (a thermocouple
-- replaced, fuel nozzles worked on, a combustion inspection, combustor tuning, a compressor
-- wash, other), when it took effect (`at`, ring time), who recorded it and a note. Written by
-- people through the API; learnt_offsets is written by the worker alone: for a thermocouple
-- replaced, each new probe's offset against the unit's baseline once learnt from the steady
-- rings after the event, {"<thermocouple>": °C}.
CREATE TABLE maintenance_events (
  unit_id         text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  id              uuid NOT NULL DEFAULT gen_random_uuid(),
  kind            text NOT NULL CHECK (kind IN ('thermocouple_replaced', 'nozzles_worked', 'combustion_inspection', 'combustor_tuning', 'compressor_wash', 'other')),
  at              timestamptz NOT NULL,
  -- numbered from 1: the probes replaced (thermocouple_replaced only)
  thermocouples   integer[],
  -- numbered from 1: the chambers worked on; null: all (or none concerned)
  chambers        integer[],
  recorded_by     text NOT NULL,
  note            text,
  key_id          text,
  recorded_at     timestamptz NOT NULL DEFAULT now(),
  learnt_offsets  jsonb NOT NULL DEFAULT '{}',
  PRIMARY KEY (unit_id, id),
  CHECK (kind <> 'thermocouple_replaced' OR cardinality(thermocouples) >= 1)
);
CREATE INDEX maintenance_events_by_time ON maintenance_events (unit_id, at);
