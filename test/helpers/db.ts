/**
 * A fresh database for one test file, cloned from the migrated template the global setup made.
 * Dropped after the file; kept when KEEP_TEST_DB is set so a failure can be inspected.
 */
import { randomBytes } from 'node:crypto';
import pg from 'pg';
import { inject } from 'vitest';
import { createPool, type Pool } from '../../services/db/pool.ts';

export interface TestDatabase {
  url: string;
  name: string;
  pool: Pool;
  drop(): Promise<void>;
}

export function adminUrl(): string {
  return inject('pgAdminUrl');
}

export function withDatabase(url: string, db: string): string {
  const u = new URL(url);
  u.pathname = '/' + db;
  return u.toString();
}

async function adminQuery(sql: string): Promise<void> {
  const c = new pg.Client({ connectionString: adminUrl() });
  await c.connect();
  try {
    await c.query(sql);
  } finally {
    await c.end();
  }
}

/** Creates an empty database (no migrations), for tests of the migration runner. */
export async function createEmptyDatabase(): Promise<TestDatabase> {
  return make(`CREATE DATABASE {name}`);
}

/** Creates a migrated database from the template. */
export async function createTestDatabase(): Promise<TestDatabase> {
  return make(`CREATE DATABASE {name} TEMPLATE ${inject('pgTemplate')}`);
}

async function make(sqlTemplate: string): Promise<TestDatabase> {
  const name = `t_${randomBytes(6).toString('hex')}`;
  // CREATE DATABASE ... TEMPLATE fails while another session is connected to the template; retry.
  for (let attempt = 0; ; attempt++) {
    try {
      await adminQuery(sqlTemplate.replace('{name}', name));
      break;
    } catch (err) {
      if (attempt > 20 || !/being accessed by other users/.test((err as Error).message)) throw err;
      await new Promise((r) => setTimeout(r, 100 + attempt * 50));
    }
  }
  const url = withDatabase(adminUrl(), name);
  const pool = createPool(url, { max: 5 });
  return {
    url,
    name,
    pool,
    async drop() {
      await pool.end().catch(() => undefined);
      if (process.env.KEEP_TEST_DB) return;
      await adminQuery(`DROP DATABASE IF EXISTS ${name} WITH (FORCE)`);
    },
  };
}
