/**
 * Processes on one embedded data directory survive each other. A command run beside a running
 * `cansight start` (here `cansight keys list`) uses that process's PostgreSQL and leaves it
 * running; when the embedded PostgreSQL dies under `cansight start`, it is started again and
 * said in the log, and when it cannot be, the process says so and exits non-zero instead of
 * answering 503 for ever.
 */
import { afterAll, describe, expect, it } from 'vitest';
import type { ChildProcess } from 'node:child_process';
import { readFile, rename } from 'node:fs/promises';
import path from 'node:path';
import { freePort } from '../services/db/embedded.ts';
import { dataDirs } from './helpers/data-dirs.ts';
import { killAll, runCli as run, until, type CliRun as Run } from './helpers/cli-run.ts';

const ADMIN_KEY = 'process-test-admin-key-0123456789-abc';
const dirs = dataDirs('cansight-procs-');
const children: ChildProcess[] = [];
afterAll(async () => {
  killAll(children);
  await dirs.removeAll();
});

/** A `cansight start --no-demo` on a fresh data directory, up and answering. */
async function started(): Promise<{ run: Run; env: Record<string, string>; dataDir: string; port: number }> {
  const dir = await dirs.make();
  const dataDir = path.join(dir, 'pg');
  const port = await freePort();
  const env = { CANSIGHT_DATA_DIR: dataDir, CANSIGHT_PG_PORT: String(await freePort()), CANSIGHT_ADMIN_KEY: ADMIN_KEY, LOG_LEVEL: 'info', PORT: String(port) };
  const r = run(['start', '--no-demo'], env, children);
  await until('the service', async () => (await units(port)) === 200, 60_000);
  return { run: r, env, dataDir, port };
}

const units = async (port: number) => (await fetch(`http://127.0.0.1:${port}/v1/units`, { headers: { authorization: `Bearer ${ADMIN_KEY}` } })).status;
const postmasterPid = async (dataDir: string) => Number((await readFile(path.join(dataDir, 'postmaster.pid'), 'utf8')).split('\n')[0]);

describe('processes on one data directory', () => {
  it('a command beside a running service uses its PostgreSQL and leaves it running', async () => {
    const s = await started();
    const pid = await postmasterPid(s.dataDir);
    const keys = run(['keys', 'list'], s.env, children);
    expect(await keys.exited, keys.log()).toBe(0);
    expect(keys.log()).toContain('using the PostgreSQL that another Cansight process runs on this data directory');
    expect(await postmasterPid(s.dataDir)).toBe(pid);
    expect(await units(s.port)).toBe(200);
    process.kill(-(s.run.child.pid as number), 'SIGTERM');
    expect(await s.run.exited).toBe(0);
  }, 120_000);

  // Intermittent under a loaded machine (a lost log line or a slow restart), open: retried; a failure in every attempt still fails.
  it('starts its PostgreSQL again when it dies, and says so', { retry: 2, timeout: 120_000 }, async () => {
    const s = await started();
    process.kill(await postmasterPid(s.dataDir), 'SIGKILL');
    await until('the service to answer again', async () => (await units(s.port)) === 200 && s.run.log().includes('embedded PostgreSQL started again'), 60_000);
    expect(s.run.log()).toContain('embedded PostgreSQL exited unexpectedly');
    process.kill(-(s.run.child.pid as number), 'SIGTERM');
    expect(await s.run.exited).toBe(0);
  });

  // Intermittent under a loaded machine (a lost log line or a slow restart), open: retried; a failure in every attempt still fails.
  it('exits non-zero, saying why, when its PostgreSQL cannot be started again', { retry: 2, timeout: 120_000 }, async () => {
    const s = await started();
    const pid = await postmasterPid(s.dataDir);
    await rename(s.dataDir, s.dataDir + '.gone');
    process.kill(pid, 'SIGKILL');
    expect(await s.run.exited).toBe(1);
    expect(s.run.log()).toMatch(/could not be started again \(5 attempts\)/);
  });
});
