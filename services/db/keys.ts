/**
 * API keys repository: every query about keys. A key is shown once at creation; only its
 * SHA-256 hash is stored. Roles: ingest, viewer, operator, admin; an optional unit scope.
 */
import { createHash, randomBytes } from 'node:crypto';
import type pg from 'pg';
import { withTransaction } from './pool.ts';

export const ROLES = ['ingest', 'viewer', 'operator', 'admin'] as const;
export type Role = (typeof ROLES)[number];

export interface KeyRecord {
  id: string;
  /** Shown to tell keys apart: "key-" and 12 hex digits of the key's hash, never part of the key. */
  keyId: string;
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

/** The id a key is shown by, from its hash (see hashKey). */
export function keyIdOf(hash: string): string {
  return 'key-' + hash.slice(0, 12);
}

/** A new random key: "csk_" and 32 random bytes in base64url. */
export function newKeyValue(): string {
  return 'csk_' + randomBytes(32).toString('base64url');
}

const COLUMNS = `id, key_id, role, unit_ids, label, created_at, last_used_at, revoked_at`;

function toRecord(r: Record<string, unknown>): KeyRecord {
  const iso = (v: unknown) => (v instanceof Date ? v.toISOString() : v == null ? null : String(v));
  return {
    id: String(r.id),
    keyId: String(r.key_id),
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
/** Entries kept in each of the key caches (verified, unknown, proven). */
const CACHE_ENTRIES = 10_000;
/** Last use is written at most this often per key, ms. */
const LAST_USED_EVERY_MS = 60_000;

/** The WHERE condition naming a key by its id (a uuid) or its key id ($1). */
const byIdOrKeyId = (v: string) => (/^[0-9a-f-]{36}$/i.test(v) ? 'id = $1' : 'key_id = $1');

export function createKeysRepository(pool: pg.Pool, opts: { cacheMs?: number } = {}) {
  const cacheMs = opts.cacheMs ?? KEY_CACHE_MS;
  // hash → verified record and when it was read; a revoked key stops working within cacheMs
  // in other processes, and at once in the process that revoked it.
  const verified = new Map<string, { record: KeyRecord; readAt: number }>();
  const lastUsedWritten = new Map<string, number>();
  const lookups = new Map<string, Promise<KeyRecord | null>>();
  // hash → when it was looked up and found unknown or revoked: asked again only after cacheMs,
  // so a client repeating a wrong key costs no query per request. Bounded; oldest dropped first.
  const misses = new Map<string, number>();
  // Hashes that have been a live key in this process (bounded, only real keys can enter): the
  // rate limit counts their requests per key, every other request per client address.
  const proven = new Map<string, true>();
  /** Keeps hash → value in a bounded map, the oldest entry going first. */
  const remember = <T>(map: Map<string, T>, hash: string, value: T) => {
    if (map.size >= CACHE_ENTRIES) map.delete(map.keys().next().value as string);
    map.set(hash, value);
  };
  // Counts revocations: a lookup that overlapped one does not keep what it found.
  let revocations = 0;
  /** Before a revocation: nothing verified so far is trusted again without asking (bumped again after it). */
  const forgetVerified = () => {
    revocations++;
    verified.clear();
    lookups.clear();
    proven.clear();
  };
  /** The live key with this hash (hashKey), or null; see verify. */
  async function verifyHash(hash: string): Promise<KeyRecord | null> {
    const now = Date.now();
    const hit = verified.get(hash);
    let record: KeyRecord | null;
    const missedAt = misses.get(hash);
    if (hit && now - hit.readAt < cacheMs) {
      record = hit.record;
    } else if (missedAt !== undefined && now - missedAt < cacheMs) {
      record = null;
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
              misses.delete(hash);
              remember(verified, hash, { record: r, readAt: now });
              remember(proven, hash, true);
            } else {
              verified.delete(hash);
              if (!r) remember(misses, hash, now);
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
      misses.delete(hashKey(value));
      const { rows } = await pool.query(
        `INSERT INTO api_keys (key_id, key_hash, role, unit_ids, label) VALUES ($1, $2, $3, $4, $5) RETURNING ${COLUMNS}`,
        [keyIdOf(hashKey(value)), hashKey(value), role, unitIds, label],
      );
      return { key: value, record: toRecord(rows[0]) };
    },

    /**
     * The key CANSIGHT_ADMIN_KEY names: made (as an admin key for every unit) the first time the
     * value is seen, and otherwise returned as it is: a revoked one stays revoked, and a key of
     * another role is not raised to admin. `created` says whether it was made now.
     */
    async ensureAdminKey(value: string): Promise<{ record: KeyRecord; created: boolean }> {
      const hash = hashKey(value);
      misses.delete(hash);
      const made = await pool.query(
        `INSERT INTO api_keys (key_id, key_hash, role, unit_ids, label) VALUES ($1, $2, 'admin', NULL, 'CANSIGHT_ADMIN_KEY')
         ON CONFLICT (key_hash) DO NOTHING RETURNING ${COLUMNS}`,
        [keyIdOf(hash), hash],
      );
      if (made.rows.length) return { record: toRecord(made.rows[0]), created: true };
      const { rows } = await pool.query(`SELECT ${COLUMNS} FROM api_keys WHERE key_hash = $1`, [hash]);
      return { record: toRecord(rows[0]), created: false };
    },

    /**
     * Makes a new admin key and revokes the old one (by id or key id) in one transaction;
     * returns the new key (shown once) and how many keys were revoked.
     */
    async rotateAdmin(oldIdOrKeyId: string, label: string | null): Promise<{ key: string; record: KeyRecord; revoked: number }> {
      const value = newKeyValue();
      forgetVerified();
      try {
        return await withTransaction(pool, async (c) => {
          const old = await c.query(`UPDATE api_keys SET revoked_at = now() WHERE ${byIdOrKeyId(oldIdOrKeyId)} AND role = 'admin' AND revoked_at IS NULL`, [oldIdOrKeyId]);
          const made = await c.query(
            `INSERT INTO api_keys (key_id, key_hash, role, unit_ids, label) VALUES ($1, $2, 'admin', NULL, $3) RETURNING ${COLUMNS}`,
            [keyIdOf(hashKey(value)), hashKey(value), label],
          );
          return { key: value, record: toRecord(made.rows[0]), revoked: old.rowCount ?? 0 };
        });
      } finally {
        revocations++;
      }
    },

    async countActiveAdmins(): Promise<number> {
      const { rows } = await pool.query(`SELECT count(*)::int AS n FROM api_keys WHERE role = 'admin' AND revoked_at IS NULL`);
      return rows[0].n;
    },

    async list(): Promise<KeyRecord[]> {
      const { rows } = await pool.query(`SELECT ${COLUMNS} FROM api_keys ORDER BY created_at, id`);
      return rows.map(toRecord);
    },

    /** Revokes by id or by key id (key-…); returns the number of keys revoked. */
    async revoke(idOrKeyId: string): Promise<number> {
      forgetVerified();
      try {
        const { rowCount } = await pool.query(`UPDATE api_keys SET revoked_at = now() WHERE ${byIdOrKeyId(idOrKeyId)} AND revoked_at IS NULL`, [idOrKeyId]);
        return rowCount ?? 0;
      } finally {
        revocations++;
      }
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

    /** True when this hash has been a live key in this process (see the rate limit). */
    isProven(hash: string): boolean {
      return proven.has(hash);
    },
  };
}

export type KeysRepository = ReturnType<typeof createKeysRepository>;
