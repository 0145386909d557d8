-- API keys: only a SHA-256 hash of each key is kept (keys are 256-bit random values, so a
-- plain hash is enough); the prefix lets people tell keys apart in listings.
CREATE TABLE api_keys (
  id            uuid PRIMARY KEY DEFAULT gen_random_uuid(),
  prefix        text NOT NULL,
  key_hash      text NOT NULL UNIQUE,
  role          text NOT NULL CHECK (role IN ('ingest', 'viewer', 'operator', 'admin')),
  unit_ids      text[],            -- NULL: every unit
  label         text,
  created_at    timestamptz NOT NULL DEFAULT now(),
  last_used_at  timestamptz,
  revoked_at    timestamptz
);
