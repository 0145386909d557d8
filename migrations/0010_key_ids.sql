-- Keys are shown by an id made from their hash, never by characters of the secret: "key-" and
-- the first 12 hex digits of the SHA-256 the table already keeps (enough to tell keys apart;
-- it tells nothing about the key that the stored hash does not). Until now the first 10
-- characters of the key were kept and shown, also where a person's action recorded which key
-- it came with; those records are rewritten to the new id.
ALTER TABLE api_keys ADD COLUMN key_id text;
UPDATE api_keys SET key_id = 'key-' || left(key_hash, 12);
UPDATE alert_history h SET details = jsonb_set(h.details, '{key}', to_jsonb(k.key_id))
  FROM api_keys k WHERE h.details ->> 'key' = k.prefix;
UPDATE unit_config_versions v SET created_by = k.key_id FROM api_keys k WHERE v.created_by = k.prefix;
UPDATE webhooks w SET created_by = k.key_id FROM api_keys k WHERE w.created_by = k.prefix;
UPDATE baseline_requests r SET requested_by = k.key_id FROM api_keys k WHERE r.requested_by = k.prefix;
ALTER TABLE api_keys ALTER COLUMN key_id SET NOT NULL;
ALTER TABLE api_keys DROP COLUMN prefix;
CREATE UNIQUE INDEX api_keys_key_id ON api_keys (key_id);
