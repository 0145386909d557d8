-- Combustion modes: the short code a site sends with a ring for the combustion mode the unit
-- runs in (its own names, e.g. "premix", "m6"); null when the site sends none. The analysis
-- fits baselines per mode and treats a change of mode as a transient.
ALTER TABLE rings ADD COLUMN mode text CHECK (mode IS NULL OR (length(mode) BETWEEN 1 AND 16));
