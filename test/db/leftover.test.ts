/**
 * A start that finds postmaster.pid on its data directory: a server left running by a process
 * killed outright (kill -9) is said and stopped before the new one starts; a file whose pid now
 * belongs to another process is removed and that process is never signalled.
 */
import { spawn } from 'node:child_process';
import { chmod, mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startEmbeddedPostgres, whoIs } from '../../services/db/embedded.ts';
import { createLogger } from '../../services/db/logger.ts';

let dir: string;
let dataDir: string;
const lines: Array<Record<string, unknown>> = [];
const logger = createLogger('info', {}, { write: (l: string) => void lines.push(JSON.parse(l)) });

beforeAll(async () => {
  dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-leftover-'));
  await chmod(dir, 0o777);
  dataDir = path.join(dir, 'pg');
  const first = await startEmbeddedPostgres({ dataDir, preferredPort: 0, logger });
  await first.stop();
}, 180_000);
afterAll(async () => {
  if (dir) await rm(dir, { recursive: true, force: true });
});

describe('a postmaster.pid found at start', () => {
  it('names a live process that is not PostgreSQL: the file is removed, the process is left alone, the server starts', async () => {
    const other = spawn('sleep', ['60']);
    try {
      await writeFile(path.join(dataDir, 'postmaster.pid'), `${other.pid}\n${dataDir}\n${Math.floor(Date.now() / 1000)}\n5432\n`);
      expect(whoIs(other.pid!, dataDir)).toEqual({ is: 'other', command: 'sleep' });
      const server = await startEmbeddedPostgres({ dataDir, preferredPort: 0, logger });
      await server.stop();
      expect(other.exitCode).toBeNull();
      expect(other.signalCode).toBeNull();
      expect(lines.some((l) => l.pid === other.pid && String(l.msg).includes('its pid was reused'))).toBe(true);
    } finally {
      other.kill();
    }
  }, 60_000);

  it('names the server of a process killed outright: it is said and stopped, and the new one starts at once', async () => {
    const child = spawn(process.execPath, ['--import', 'tsx', path.join(import.meta.dirname, 'start-and-hang.ts'), dataDir], { stdio: ['ignore', 'pipe', 'inherit'] });
    await new Promise<void>((resolve, reject) => {
      child.stdout!.on('data', (c: Buffer) => c.toString().includes('ready') && resolve());
      child.once('exit', (code) => reject(new Error(`the first process ended (${code})`)));
    });
    const leftoverPid = Number((await readFile(path.join(dataDir, 'postmaster.pid'), 'utf8')).split('\n')[0]);
    child.kill('SIGKILL');
    await new Promise((r) => child.once('exit', r));
    // The server outlives the process that started it (it runs in its own process group).
    expect(whoIs(leftoverPid, dataDir)).toEqual({ is: 'server' });
    const server = await startEmbeddedPostgres({ dataDir, preferredPort: 0, logger });
    try {
      expect(lines.some((l) => l.pid === leftoverPid && String(l.msg).includes('still running on this data directory'))).toBe(true);
      expect(whoIs(leftoverPid, dataDir).is).not.toBe('server');
    } finally {
      await server.stop();
    }
  }, 120_000);
});
