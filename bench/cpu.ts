/**
 * CPU time of the parts of a benchmark, from /proc (Linux): this process's main thread (the
 * server's event loop), the rest of this process (worker threads, libuv pool, GC helpers), and
 * a PostgreSQL server (the postmaster, its live children, and children that have exited).
 * On a shared machine wall-clock figures move with the neighbours; CPU seconds per ring move
 * far less, and they show which side a change helped. Elsewhere every figure is NaN.
 */
import { readFileSync, readdirSync } from 'node:fs';
import path from 'node:path';

const TICKS_PER_S = 100;

export interface CpuSample {
  mainS: number;
  processS: number;
  postgresS: number;
}

/** utime, stime, cutime, cstime of a /proc stat line, in seconds. */
function statTimes(file: string): [number, number, number, number] | null {
  let text: string;
  try {
    text = readFileSync(file, 'utf8');
  } catch {
    return null;
  }
  // The command name may hold spaces; the fields after it are space separated.
  const f = text.slice(text.lastIndexOf(')') + 2).split(' ');
  // Field 14 of the line (utime) is index 11 here, as the first two fields were cut off.
  return [Number(f[11]) / TICKS_PER_S, Number(f[12]) / TICKS_PER_S, Number(f[13]) / TICKS_PER_S, Number(f[14]) / TICKS_PER_S];
}

function parentOf(pid: string): number {
  try {
    const text = readFileSync(`/proc/${pid}/stat`, 'utf8');
    return Number(text.slice(text.lastIndexOf(')') + 2).split(' ')[1]);
  } catch {
    return -1;
  }
}

/** The postmaster's pid from a data directory, or null when it cannot be read. */
export function postmasterPid(dataDir: string | undefined): number | null {
  if (!dataDir) return null;
  try {
    const pid = Number(readFileSync(path.join(dataDir, 'postmaster.pid'), 'utf8').split('\n')[0]);
    return Number.isInteger(pid) && pid > 0 ? pid : null;
  } catch {
    return null;
  }
}

function postgresSeconds(postmaster: number | null): number {
  if (postmaster === null) return NaN;
  const own = statTimes(`/proc/${postmaster}/stat`);
  if (own === null) return NaN;
  // Exited children are in the postmaster's cutime/cstime; live ones are read one by one.
  let total = own[0] + own[1] + own[2] + own[3];
  for (const pid of readdirSync('/proc')) {
    if (pid.charCodeAt(0) > 57 || parentOf(pid) !== postmaster) continue;
    const t = statTimes(`/proc/${pid}/stat`);
    if (t) total += t[0] + t[1];
  }
  return total;
}

export function cpuSample(postmaster: number | null): CpuSample {
  const main = statTimes(`/proc/self/task/${process.pid}/stat`);
  const u = process.cpuUsage();
  return {
    mainS: main ? main[0] + main[1] : NaN,
    processS: (u.user + u.system) / 1e6,
    postgresS: postgresSeconds(postmaster),
  };
}

export interface CpuSpent {
  /** The main thread (in the HTTP phases: the server). */
  mainS: number;
  /** This process apart from its main thread (in the HTTP phases: mostly the client thread). */
  otherS: number;
  postgresS: number;
}

export function cpuSince(before: CpuSample, postmaster: number | null): CpuSpent {
  const now = cpuSample(postmaster);
  const mainS = now.mainS - before.mainS;
  return { mainS, otherS: now.processS - before.processS - mainS, postgresS: now.postgresS - before.postgresS };
}

/** µs of CPU per ring, e.g. "server 9.8 µs, other 2.1 µs, PostgreSQL 14.2 µs". */
export function describeCpu(spent: CpuSpent, rings: number, mainName: string, otherName: string): string {
  const us = (s: number) => (Number.isFinite(s) ? `${((s * 1e6) / rings).toFixed(1)} µs` : 'n/a');
  return `CPU per ring: ${mainName} ${us(spent.mainS)}, ${otherName} ${us(spent.otherS)}, PostgreSQL ${us(spent.postgresS)}`;
}
