-- Requests to fit a baseline over a window whose rings are not all analysed yet. The worker
-- holding the unit fits the request once analysis has passed the end of the window, and
-- records the version made or why none could be.
CREATE TABLE baseline_requests (
  id            uuid PRIMARY KEY DEFAULT gen_random_uuid(),
  unit_id       text NOT NULL REFERENCES units (id) ON DELETE CASCADE,
  window_from   timestamptz NOT NULL,
  window_to     timestamptz NOT NULL CHECK (window_to > window_from),
  requested_by  text NOT NULL,
  requested_at  timestamptz NOT NULL DEFAULT now(),
  state         text NOT NULL DEFAULT 'pending' CHECK (state IN ('pending', 'fitted', 'failed')),
  version       integer,
  error         text,
  finished_at   timestamptz
);
CREATE INDEX baseline_requests_pending ON baseline_requests (unit_id) WHERE state = 'pending';
