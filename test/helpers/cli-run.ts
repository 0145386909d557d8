/**
 * The `cansight` command run as a child process in a process group of its own (as a shell runs
 * a foreground job), with its output kept; and waiting for a condition with a time limit.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { fileURLToPath } from 'node:url';

export const BIN = fileURLToPath(new URL('../../bin/cansight.mjs', import.meta.url));

export interface CliRun {
  child: ChildProcess;
  /** Everything it wrote so far, stdout and stderr together. */
  log(): string;
  exited: Promise<number | null>;
}

/** Runs `cansight ARGS` on the embedded database (DATABASE_URL removed) with env added; the child is pushed to `children` for clean-up. */
export function runCli(args: string[], env: Record<string, string>, children: ChildProcess[]): CliRun {
  const full: Record<string, string> = { ...(process.env as Record<string, string>), ...env };
  delete full.DATABASE_URL;
  const child = spawn(process.execPath, [BIN, ...args], { env: full, stdio: ['ignore', 'pipe', 'pipe'], detached: true });
  children.push(child);
  let out = '';
  child.stdout?.on('data', (b) => (out += b));
  child.stderr?.on('data', (b) => (out += b));
  const exited = new Promise<number | null>((r) => child.once('exit', (code) => r(code)));
  return { child, log: () => out, exited };
}

/** Kills, with its whole process group, every child still running. */
export function killAll(children: ChildProcess[]): void {
  for (const c of children) if (c.exitCode === null && c.signalCode === null) process.kill(-(c.pid as number), 'SIGKILL');
}

const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

/** Waits until `fn` says yes (an error counts as no), or throws naming `what` after timeoutMs. */
export async function until(what: string, fn: () => Promise<boolean>, timeoutMs = 40_000, pollMs = 100): Promise<void> {
  const end = Date.now() + timeoutMs;
  while (!(await fn().catch(() => false))) {
    if (Date.now() > end) throw new Error(`timed out waiting for ${what}`);
    await sleep(pollMs);
  }
}
