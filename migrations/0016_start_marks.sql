-- The start detector's state kept with each day's alert-rule mark, so that a re-analysis from
-- that day finds the starts in the rings judged again (history that arrives after later rings).
ALTER TABLE alert_state_marks ADD COLUMN start_state jsonb;
