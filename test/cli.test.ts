/**
 * The `cansight` command as a person runs it: child processes of bin/cansight.mjs.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { execFile, spawn } from 'node:child_process';
import { mkdtemp, chmod, rm } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { promisify } from 'node:util';
import { createTestDatabase, type TestDatabase } from './helpers/db.ts';
import { freePort } from '../services/db/embedded.ts';

const run = promisify(execFile);
const BIN = fileURLToPath(new URL('../bin/cansight.mjs', import.meta.url));
const dbs: TestDatabase[] = [];
const dirs: string[] = [];
afterAll(async () => {
  for (const d of dbs) await d.drop();
  for (const d of dirs) await rm(d, { recursive: true, force: true });
});

function cli(args: string[], env: Record<string, string>) {
  return run(process.execPath, [BIN, ...args], { env: { ...process.env, LOG_LEVEL: 'warn', ...env } }).then(
    (r) => ({ code: 0, stdout: r.stdout, stderr: r.stderr }),
    (e) => ({ code: e.code as number, stdout: e.stdout as string, stderr: e.stderr as string }),
  );
}

describe('cansight command', () => {
  it('creates, lists and revokes keys; a revoked key no longer opens the API', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const env = { DATABASE_URL: db.url };
    const created = await cli(['keys', 'create', '--role', 'viewer', '--units', 'a-1,b-2', '--label', 'control room'], env);
    expect(created.code).toBe(0);
    const key = /csk_[A-Za-z0-9_-]+/.exec(created.stdout)?.[0];
    expect(key).toBeDefined();
    const { rows } = await db.pool.query('SELECT role, unit_ids, key_hash FROM api_keys');
    expect(rows).toHaveLength(1);
    expect(rows[0]).toMatchObject({ role: 'viewer', unit_ids: ['a-1', 'b-2'] });
    expect(JSON.stringify(rows)).not.toContain(key!.slice(4));
    const listed = await cli(['keys', 'list'], env);
    expect(listed.stdout).toContain(key!.slice(0, 10));
    expect(listed.stdout).not.toContain(key);
    const revoked = await cli(['keys', 'revoke', key!.slice(0, 10)], env);
    expect(revoked.code).toBe(0);
    const again = await cli(['keys', 'revoke', key!.slice(0, 10)], env);
    expect(again.code).toBe(1);
    const { rows: after } = await db.pool.query('SELECT revoked_at FROM api_keys');
    expect(after[0].revoked_at).not.toBeNull();
  });

  it('refuses a bad role and an unknown command with exit 2 and a message', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const bad = await cli(['keys', 'create', '--role', 'superuser'], { DATABASE_URL: db.url });
    expect(bad.code).toBe(2);
    expect(bad.stderr).toContain('superuser');
    const unknown = await cli(['frobnicate'], { DATABASE_URL: db.url });
    expect(unknown.code).toBe(2);
    expect(unknown.stderr).toContain('frobnicate');
  });

  it('stops at once on a bad configuration value, naming the variable', async () => {
    const bad = await cli(['migrate'], { PORT: 'eighty', DATABASE_URL: 'postgres://x@127.0.0.1:1/x' });
    expect(bad.code).toBe(2);
    expect(bad.stderr).toContain('PORT');
    expect(bad.stderr).toContain('eighty');
    const url = await cli(['migrate'], { DATABASE_URL: 'mysql://x' });
    expect(url.code).toBe(2);
    expect(url.stderr).toContain('DATABASE_URL');
  });

  it('start on the embedded default answers /health, prints the URL and a first admin key, and stops cleanly on SIGTERM', async () => {
    const dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-start-'));
    await chmod(dir, 0o777);
    dirs.push(dir);
    const port = await freePort();
    const env: Record<string, string> = { ...(process.env as Record<string, string>), CANSIGHT_DATA_DIR: path.join(dir, 'pg'), PORT: String(port), CANSIGHT_PG_PORT: String(await freePort()), LOG_LEVEL: 'warn' };
    delete env.DATABASE_URL;
    const child = spawn(process.execPath, [BIN, 'start'], { env, stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    child.stdout.on('data', (b) => (out += b));
    child.stderr.on('data', (b) => (out += b));
    const exited = new Promise<number | null>((r) => child.on('exit', (code) => r(code)));
    try {
      let health: Response | undefined;
      for (let i = 0; i < 300 && !health; i++) {
        await new Promise((r) => setTimeout(r, 100));
        health = await fetch(`http://127.0.0.1:${port}/health`).catch(() => undefined);
      }
      expect(health?.status).toBe(200);
      await new Promise((r) => setTimeout(r, 200));
      expect(out).toContain(`http://127.0.0.1:${port}`);
      const key = /admin key[^:]*: (csk_[A-Za-z0-9_-]+)/.exec(out)?.[1];
      expect(key, out).toBeDefined();
      const units = await fetch(`http://127.0.0.1:${port}/v1/units`, { headers: { authorization: `Bearer ${key}` } });
      expect(units.status).toBe(200);
      expect(((await units.json()) as { units: unknown[] }).units.length).toBeGreaterThanOrEqual(2);
    } finally {
      child.kill('SIGTERM');
    }
    expect(await exited).toBe(0);
    expect(out).not.toMatch(/"level":(50|60)/);
  });
});
