/**
 * API keys repository: every query about keys. A key is shown once at creation; only its
 * SHA-256 hash is stored. Roles: ingest, viewer, operator, admin; an optional unit scope.
 */
import { createHash, randomBytes } from 'node:crypto';
import type pg from 'pg';

export const ROLES = ['ingest', 'viewer', 'operator', 'admin'] as const;
export type Role = (typeof ROLES)[number];

export interface KeyRecord {
  id: string;
  prefix: string;
  role: Role;
  unitIds: string[] | null;
  label: string | null;
  createdAt: string;
  lastUsedAt: string | null;
  revokedAt: string | null;
}

export function hashKey(key: string): string {
  return createHash('sha256').update(key, 'utf8').digest('hex');
}

/** A new random key: "csk_" and 32 random bytes in base64url. */
export function newKeyValue(): string {
  return 'csk_' + randomBytes(32).toString('base64url');
}

const COLUMNS = `id, prefix, role, unit_ids, label, created_at, last_used_at, revoked_at`;

function toRecord(r: Record<string, unknown>): KeyRecord {
  const iso = (v: unknown) => (v instanceof Date ? v.toISOString() : v == null ? null : String(v));
  return {
    id: String(r.id),
    prefix: String(r.prefix),
    role: r.role as Role,
    unitIds: (r.unit_ids as string[] | null) ?? null,
    label: (r.label as string | null) ?? null,
    createdAt: iso(r.created_at) as string,
    lastUsedAt: iso(r.last_used_at),
    revokedAt: iso(r.revoked_at),
  };
}

export function createKeysRepository(pool: pg.Pool) {
  return {
    /** Creates a key; returns its record and the key value, which is never stored. */
    async create(role: Role, unitIds: string[] | null, label: string | null = null, value = newKeyValue()): Promise<{ key: string; record: KeyRecord }> {
      const { rows } = await pool.query(
        `INSERT INTO api_keys (prefix, key_hash, role, unit_ids, label) VALUES ($1, $2, $3, $4, $5) RETURNING ${COLUMNS}`,
        [value.slice(0, 10), hashKey(value), role, unitIds, label],
      );
      return { key: value, record: toRecord(rows[0]) };
    },

    /** Makes sure an admin key with exactly this value exists and is not revoked. */
    async ensureAdminKey(value: string): Promise<KeyRecord> {
      const { rows } = await pool.query(
        `INSERT INTO api_keys (prefix, key_hash, role, unit_ids, label) VALUES ($1, $2, 'admin', NULL, 'CANSIGHT_ADMIN_KEY')
         ON CONFLICT (key_hash) DO UPDATE SET role = 'admin', unit_ids = NULL, revoked_at = NULL RETURNING ${COLUMNS}`,
        [value.slice(0, 10), hashKey(value)],
      );
      return toRecord(rows[0]);
    },

    async countActiveAdmins(): Promise<number> {
      const { rows } = await pool.query(`SELECT count(*)::int AS n FROM api_keys WHERE role = 'admin' AND revoked_at IS NULL`);
      return rows[0].n;
    },

    async list(): Promise<KeyRecord[]> {
      const { rows } = await pool.query(`SELECT ${COLUMNS} FROM api_keys ORDER BY created_at, id`);
      return rows.map(toRecord);
    },

    /** Revokes by id or by prefix; returns the number of keys revoked. */
    async revoke(idOrPrefix: string): Promise<number> {
      const isUuid = /^[0-9a-f-]{36}$/i.test(idOrPrefix);
      const { rowCount } = await pool.query(
        isUuid
          ? `UPDATE api_keys SET revoked_at = now() WHERE id = $1 AND revoked_at IS NULL`
          : `UPDATE api_keys SET revoked_at = now() WHERE prefix = $1 AND revoked_at IS NULL`,
        [idOrPrefix],
      );
      return rowCount ?? 0;
    },

    /** The live key with this value, or null; records last use at most once a minute. */
    async verify(value: string): Promise<KeyRecord | null> {
      const { rows } = await pool.query(
        `UPDATE api_keys SET last_used_at = now()
           WHERE key_hash = $1 AND revoked_at IS NULL AND (last_used_at IS NULL OR last_used_at < now() - interval '1 minute')
         RETURNING ${COLUMNS}`,
        [hashKey(value)],
      );
      if (rows.length) return toRecord(rows[0]);
      const found = await pool.query(`SELECT ${COLUMNS} FROM api_keys WHERE key_hash = $1 AND revoked_at IS NULL`, [hashKey(value)]);
      return found.rows.length ? toRecord(found.rows[0]) : null;
    },
  };
}

export type KeysRepository = ReturnType<typeof createKeysRepository>;
