-- An alert the rules raised after the point a re-analysis goes back to, and that subscribers were
-- told of, is not removed when its unit's rings are judged again: it is set aside (closed, with
-- rewound_at and whether it was open then). If the re-analysis raises the same condition again,
-- the set-aside alert takes the new judgement under its own id (subscribers who heard of it are
-- not told of it a second time); if not, it is withdrawn once the re-analysis ends, and those who
-- heard it raised hear that it was withdrawn.
ALTER TABLE alerts
  ADD COLUMN rewound_at timestamptz,
  ADD COLUMN rewound_open boolean;
CREATE INDEX alerts_rewound ON alerts (unit_id, condition_key, raised_at) WHERE rewound_at IS NOT NULL;

-- Whether any subscription has been sent a change of the alert (only such alerts are set aside;
-- one no subscriber heard of is removed as before).
ALTER TABLE alerts ADD COLUMN pushed boolean NOT NULL DEFAULT false;
UPDATE alerts a SET pushed = true WHERE EXISTS (SELECT 1 FROM webhook_outbox o WHERE o.alert_id = a.id);
