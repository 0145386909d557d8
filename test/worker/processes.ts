/**
 * Worker processes for the crash and scale-out tests: `node bin/cansight.mjs worker` as a child
 * process on the test database, killed with SIGKILL when the test wants it to die.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { TEST_WORKER_ENV } from './fixtures.ts';

const BIN = fileURLToPath(new URL('../../bin/cansight.mjs', import.meta.url));

export interface WorkerProcess {
  id: string;
  child: ChildProcess;
  /** What the process wrote to stderr (for failure messages). */
  stderr(): string;
  /** SIGKILL, and wait for the exit. */
  kill(): Promise<void>;
  /** SIGTERM (a clean stop that gives the units back), and wait for the exit. */
  stop(): Promise<number | null>;
}

export function startWorkerProcess(databaseUrl: string, id: string, env: Record<string, string> = {}): WorkerProcess {
  const child = spawn(process.execPath, [BIN, 'worker'], {
    env: { ...process.env, ...TEST_WORKER_ENV, LOG_LEVEL: 'warn', ...env, DATABASE_URL: databaseUrl, CANSIGHT_WORKER_ID: id },
    stdio: ['ignore', 'ignore', 'pipe'],
  });
  let err = '';
  child.stderr?.on('data', (d: Buffer) => {
    err = (err + d.toString()).slice(-20_000);
  });
  const exited = new Promise<number | null>((resolve) => child.once('exit', (code) => resolve(code)));
  return {
    id,
    child,
    stderr: () => err,
    async kill() {
      if (child.exitCode === null && child.signalCode === null) child.kill('SIGKILL');
      await exited;
    },
    async stop() {
      if (child.exitCode === null && child.signalCode === null) child.kill('SIGTERM');
      return exited;
    },
  };
}
