/**
 * Migration runner over migrations/NNNN_name.sql: each file once, in order, each in its own
 * transaction together with its row in schema_migrations. A session-level advisory lock makes
 * two processes that start at the same moment take turns; the second finds nothing to do.
 */
import { readdir, readFile } from 'node:fs/promises';
import { createHash } from 'node:crypto';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import type pg from 'pg';
import type { Logger } from './logger.ts';

export const MIGRATIONS_DIR = fileURLToPath(new URL('../../migrations/', import.meta.url));
const LOCK_KEY = 0x43616e73; // 'Cans'

export interface Migration {
  id: number;
  name: string;
  file: string;
  sql: string;
  checksum: string;
}

const cache = new Map<string, Promise<Migration[]>>();

/** The migration files of a folder, read once per process. */
export function readMigrations(dir = MIGRATIONS_DIR): Promise<Migration[]> {
  let p = cache.get(dir);
  if (!p) {
    p = readMigrationFiles(dir);
    p.catch(() => cache.delete(dir));
    cache.set(dir, p);
  }
  return p;
}

async function readMigrationFiles(dir: string): Promise<Migration[]> {
  const files = (await readdir(dir)).filter((f) => f.endsWith('.sql')).sort();
  const out: Migration[] = [];
  for (const file of files) {
    const m = /^(\d{4})_([a-z0-9_]+)\.sql$/.exec(file);
    if (!m) throw new Error(`migration file name ${file} does not match NNNN_name.sql`);
    const sql = await readFile(path.join(dir, file), 'utf8');
    const id = Number(m[1]);
    if (out.length && out[out.length - 1].id === id) throw new Error(`two migrations numbered ${m[1]}`);
    out.push({ id, name: m[2], file, sql, checksum: createHash('sha256').update(sql).digest('hex') });
  }
  return out;
}

async function ensureTable(client: pg.ClientBase): Promise<void> {
  await client.query(`CREATE TABLE IF NOT EXISTS schema_migrations (
    id integer PRIMARY KEY, name text NOT NULL, checksum text NOT NULL,
    applied_at timestamptz NOT NULL DEFAULT now())`);
}

/** Applies every migration not yet recorded; returns the ids applied by this call. */
export async function migrate(pool: pg.Pool, logger?: Logger, dir = MIGRATIONS_DIR): Promise<number[]> {
  const migrations = await readMigrations(dir);
  const client = await pool.connect();
  const applied: number[] = [];
  try {
    await client.query('SELECT pg_advisory_lock($1)', [LOCK_KEY]);
    try {
      await ensureTable(client);
      const { rows } = await client.query<{ id: number; checksum: string }>('SELECT id, checksum FROM schema_migrations');
      const done = new Map(rows.map((r) => [r.id, r.checksum]));
      for (const m of migrations) {
        const had = done.get(m.id);
        if (had !== undefined) {
          if (had !== m.checksum) logger?.warn({ migration: m.file }, 'applied migration file has changed since; changes are not re-applied');
          continue;
        }
        await client.query('BEGIN');
        try {
          await client.query('INSERT INTO schema_migrations (id, name, checksum) VALUES ($1, $2, $3)', [m.id, m.name, m.checksum]);
          await client.query(m.sql);
          await client.query('COMMIT');
        } catch (err) {
          await client.query('ROLLBACK');
          throw new Error(`migration ${m.file} failed: ${(err as Error).message}`);
        }
        applied.push(m.id);
        logger?.info({ migration: m.file }, 'migration applied');
      }
    } finally {
      await client.query('SELECT pg_advisory_unlock($1)', [LOCK_KEY]);
    }
  } finally {
    client.release();
  }
  return applied;
}

/** True when every migration file has been applied (used by /ready). */
export async function migrationsCurrent(pool: pg.Pool, dir = MIGRATIONS_DIR): Promise<boolean> {
  const migrations = await readMigrations(dir);
  const { rows } = await pool.query<{ n: string }>(
    `SELECT count(*)::text AS n FROM schema_migrations WHERE id = ANY($1::int[])`,
    [migrations.map((m) => m.id)],
  ).catch(() => ({ rows: [{ n: '-1' }] }));
  return Number(rows[0].n) === migrations.length;
}
