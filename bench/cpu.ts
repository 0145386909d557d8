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
  /** Of postgresS: the backends serving client connections (the rest is background work). */
  connectionsS: number;
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

/** A backend serving a client connection shows the client's address in its process title. */
function isConnection(pid: string): boolean {
  try {
    return /\(\d+\)|\[local\]/.test(readFileSync(`/proc/${pid}/cmdline`, 'latin1'));
  } catch {
    return false;
  }
}

export function postgresSeconds(postmaster: number | null): { all: number; connections: number } {
  if (postmaster === null) return { all: NaN, connections: NaN };
  const own = statTimes(`/proc/${postmaster}/stat`);
  if (own === null) return { all: NaN, connections: NaN };
  // Exited children are in the postmaster's cutime/cstime; live ones are read one by one.
  let all = own[0] + own[1] + own[2] + own[3];
  let connections = 0;
  for (const pid of readdirSync('/proc')) {
    if (pid.charCodeAt(0) > 57 || parentOf(pid) !== postmaster) continue;
    const t = statTimes(`/proc/${pid}/stat`);
    if (!t) continue;
    all += t[0] + t[1];
    if (isConnection(pid)) connections += t[0] + t[1];
  }
  return { all, connections };
}

/** CPU seconds of another process and its exited children, or NaN when it cannot be read. */
export function processSeconds(pid: number): number {
  const t = statTimes(`/proc/${pid}/stat`);
  return t ? t[0] + t[1] + t[2] + t[3] : NaN;
}

export function cpuSample(postmaster: number | null): CpuSample {
  const main = statTimes(`/proc/self/task/${process.pid}/stat`);
  const u = process.cpuUsage();
  const pg = postgresSeconds(postmaster);
  return {
    mainS: main ? main[0] + main[1] : NaN,
    processS: (u.user + u.system) / 1e6,
    postgresS: pg.all,
    connectionsS: pg.connections,
  };
}

export interface CpuSpent {
  /** The main thread (in the HTTP phases: the server). */
  mainS: number;
  /** This process apart from its main thread (in the HTTP phases: mostly the client thread). */
  otherS: number;
  postgresS: number;
  /** Of postgresS: backends of client connections (the rest: autovacuum, WAL writer, checkpoints…). */
  connectionsS: number;
}

export function cpuSince(before: CpuSample, postmaster: number | null): CpuSpent {
  const now = cpuSample(postmaster);
  const mainS = now.mainS - before.mainS;
  return {
    mainS,
    otherS: now.processS - before.processS - mainS,
    postgresS: now.postgresS - before.postgresS,
    // A connection opened during the span counts from its start.
    connectionsS: now.connectionsS - before.connectionsS,
  };
}

/** µs of CPU per ring, e.g. "server 9.8 µs, other 2.1 µs, PostgreSQL 14.2 µs (connections 12.0 µs)". */
export function describeCpu(spent: CpuSpent, rings: number, mainName: string, otherName: string): string {
  const us = (s: number) => (Number.isFinite(s) ? `${((s * 1e6) / rings).toFixed(1)} µs` : 'n/a');
  return `CPU per ring: ${mainName} ${us(spent.mainS)}, ${otherName} ${us(spent.otherS)}, PostgreSQL ${us(spent.postgresS)} (connections ${us(spent.connectionsS)})`;
}
