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

/** How long a verified key is trusted without asking the database again, ms. */
export const KEY_CACHE_MS = 5_000;
/** Last use is written at most this often per key, ms. */
const LAST_USED_EVERY_MS = 60_000;

export function createKeysRepository(pool: pg.Pool, opts: { cacheMs?: number } = {}) {
  const cacheMs = opts.cacheMs ?? KEY_CACHE_MS;
  // hash → verified record and when it was read; a revoked key stops working within cacheMs
  // in other processes, and at once in the process that revoked it.
  const verified = new Map<string, { record: KeyRecord; readAt: number }>();
  const lastUsedWritten = new Map<string, number>();
  const lookups = new Map<string, Promise<KeyRecord | null>>();
  // Counts revocations: a lookup that overlapped one does not keep what it found.
  let revocations = 0;
  /** The live key with this hash (hashKey), or null; see verify. */
  async function verifyHash(hash: string): Promise<KeyRecord | null> {
    const now = Date.now();
    const hit = verified.get(hash);
    let record: KeyRecord | null;
    if (hit && now - hit.readAt < cacheMs) {
      record = hit.record;
    } else {
      // Requests with the same key while its lookup is under way share that lookup.
      let lookup = lookups.get(hash);
      if (!lookup) {
        const asOf = revocations;
        lookup = pool
          .query(`SELECT ${COLUMNS} FROM api_keys WHERE key_hash = $1 AND revoked_at IS NULL`, [hash])
          .then((found) => {
            const r = found.rows.length ? toRecord(found.rows[0]) : null;
            if (r && asOf === revocations) {
              if (verified.size > 10_000) verified.clear();
              verified.set(hash, { record: r, readAt: now });
            } else {
              verified.delete(hash);
            }
            return r;
          })
          .finally(() => {
            if (lookups.get(hash) === lookup) lookups.delete(hash);
          });
        lookups.set(hash, lookup);
      }
      record = await lookup;
    }
    if (record && now - (lastUsedWritten.get(hash) ?? 0) >= LAST_USED_EVERY_MS) {
      lastUsedWritten.set(hash, now);
      pool.query(`UPDATE api_keys SET last_used_at = now() WHERE key_hash = $1`, [hash]).catch(() => lastUsedWritten.delete(hash));
    }
    return record;
  }

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
      revocations++;
      verified.clear();
      lookups.clear();
      const isUuid = /^[0-9a-f-]{36}$/i.test(idOrPrefix);
      const { rowCount } = await pool.query(
        isUuid
          ? `UPDATE api_keys SET revoked_at = now() WHERE id = $1 AND revoked_at IS NULL`
          : `UPDATE api_keys SET revoked_at = now() WHERE prefix = $1 AND revoked_at IS NULL`,
        [idOrPrefix],
      );
      revocations++;
      return rowCount ?? 0;
    },

    /**
     * The live key with this value, or null. Verified keys are kept for a few seconds so a busy
     * client costs no query per request; last use is recorded at most once a minute, after the
     * answer, without holding the request.
     */
    async verify(value: string): Promise<KeyRecord | null> {
      return verifyHash(hashKey(value));
    },

    verifyHash,
  };
}

export type KeysRepository = ReturnType<typeof createKeysRepository>;
