-- How far a unit's stored rollups reach. While a unit's rings arrive live, the rollups of its
-- open hour are kept in the worker's memory and written every few seconds instead of with every
-- ring; rollups_to is the time of the last in-order ring whose analysis the stored hourly and
-- daily rollups include. A worker that takes a unit over (or restarts after a crash) recomputes
-- the hours after rollups_to from the stored analysis, so no analysed ring is missed.
ALTER TABLE analysis_progress ADD COLUMN rollups_to timestamptz NOT NULL DEFAULT '-infinity';
UPDATE analysis_progress SET rollups_to = watermark_ts WHERE watermark_ts IS NOT NULL;
