/**
 * The one pg Pool of a process, with a statement timeout, and a helper that runs a function in
 * a transaction on one client (COMMIT on success, ROLLBACK on any error).
 */
import pg from 'pg';
import type { Logger } from './logger.ts';

export type Pool = pg.Pool;
export type PoolClient = pg.PoolClient;

export function createPool(url: string, opts: { max?: number; statementTimeoutMs?: number; logger?: Logger } = {}): pg.Pool {
  const pool = new pg.Pool({
    connectionString: url,
    max: opts.max ?? 10,
    statement_timeout: opts.statementTimeoutMs ?? 60_000,
    connectionTimeoutMillis: 5_000,
    idleTimeoutMillis: 30_000,
  });
  // An idle client losing its connection must not crash the process; the next query reconnects.
  pool.on('error', (err) => opts.logger?.warn({ err: err.message }, 'idle database connection lost'));
  return pool;
}

export async function withTransaction<T>(pool: pg.Pool, fn: (client: pg.PoolClient) => Promise<T>): Promise<T> {
  const client = await pool.connect();
  let broken = false;
  try {
    await client.query('BEGIN');
    const result = await fn(client);
    await client.query('COMMIT');
    return result;
  } catch (err) {
    try {
      await client.query('ROLLBACK');
    } catch {
      broken = true;
    }
    throw err;
  } finally {
    client.release(broken);
  }
}

/** True for errors that mean the database could not be reached or went away mid-request. */
export function isDatabaseUnavailable(err: unknown): boolean {
  const e = err as { code?: string; message?: string } | null;
  if (!e) return false;
  const code = e.code ?? '';
  if (['ECONNREFUSED', 'ECONNRESET', 'ETIMEDOUT', 'EPIPE', 'ENOTFOUND', 'EHOSTUNREACH', '57P01', '57P02', '57P03', '08000', '08001', '08003', '08004', '08006', '53300'].includes(code)) return true;
  const msg = e.message ?? '';
  return /Connection terminated|connection timeout|timeout exceeded when trying to connect|Client has encountered a connection error|not queryable/i.test(msg);
}
