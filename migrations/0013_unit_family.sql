-- A unit's configuration family: units of one design (the same chamber and thermocouple count)
-- share a family name so they can be compared side by side. Optional; changed in place like
-- name and site.
ALTER TABLE units ADD COLUMN family text CHECK (family ~ '^[a-z0-9-]{1,40}$');
CREATE INDEX units_by_family ON units (family) WHERE family IS NOT NULL;
