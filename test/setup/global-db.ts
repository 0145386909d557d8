/**
 * Vitest global setup: one PostgreSQL server for the whole run, chosen in this order:
 * 1. TEST_DATABASE_URL, if set;
 * 2. a Testcontainers PostgreSQL container, if a container engine answers;
 * 3. otherwise an embedded PostgreSQL in a fresh temporary directory on a free port.
 * A template database is migrated once; each test file clones it (test/helpers/db.ts).
 */
import pg from 'pg';
import type { TestProject } from 'vitest/node';
import { createLogger } from '../../services/db/logger.ts';
import { startThrowawayPostgres } from '../../services/db/embedded.ts';
import { createPool } from '../../services/db/pool.ts';
import { migrate } from '../../services/db/migrate.ts';

export const TEMPLATE_DB = 'cansight_template';

declare module 'vitest' {
  export interface ProvidedContext {
    pgAdminUrl: string;
    pgTemplate: string;
  }
}

async function tryContainer(): Promise<{ url: string; stop: () => Promise<void> } | undefined> {
  try {
    const { getContainerRuntimeClient } = await import('testcontainers');
    await Promise.race([
      getContainerRuntimeClient(),
      new Promise((_, reject) => setTimeout(() => reject(new Error('no answer')), 5000)),
    ]);
  } catch {
    return undefined;
  }
  const { PostgreSqlContainer } = await import('@testcontainers/postgresql');
  const c = await new PostgreSqlContainer('postgres:17-alpine').start();
  return { url: c.getConnectionUri().replace(/\/[^/]+$/, '/postgres'), stop: async () => void (await c.stop()) };
}

export default async function setup(project: TestProject): Promise<() => Promise<void>> {
  const logger = createLogger(process.env.TEST_LOG_LEVEL ?? 'warn', { component: 'test-setup' });
  let adminUrl = process.env.TEST_DATABASE_URL;
  let stop: () => Promise<void> = async () => undefined;
  if (!adminUrl) {
    const container = await tryContainer();
    if (container) {
      adminUrl = container.url;
      stop = container.stop;
    } else {
      const server = await startThrowawayPostgres('cansight-test-pg', logger);
      adminUrl = server.url;
      stop = () => server.stop();
    }
  }
  const admin = new pg.Client({ connectionString: adminUrl });
  await admin.connect();
  await admin.query(`DROP DATABASE IF EXISTS ${TEMPLATE_DB}`);
  await admin.query(`CREATE DATABASE ${TEMPLATE_DB}`);
  await admin.end();
  const templateUrl = withDatabase(adminUrl, TEMPLATE_DB);
  const pool = createPool(templateUrl, { max: 2 });
  await migrate(pool, logger);
  await pool.end();
  project.provide('pgAdminUrl', adminUrl);
  project.provide('pgTemplate', TEMPLATE_DB);
  return stop;
}

export function withDatabase(url: string, db: string): string {
  const u = new URL(url);
  u.pathname = '/' + db;
  return u.toString();
}
