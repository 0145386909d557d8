/**
 * What a person sees of `cansight start`. The choice of output depends on LOG_FORMAT and on
 * whether stdout is a terminal (checked for every combination); then the real command in a
 * pseudo-terminal (util-linux `script`, which gives the child a terminal of its own and copies
 * what it draws to a pipe): on a fresh data directory it shows the header (URL, admin key, where
 * data and log are kept) once, then one progress line redrawn in place (history sent, rings
 * stored and analysed, units caught up, time left) until the demo is live, and no JSON; the log
 * goes to the file the header names, as JSON lines. With LOG_FORMAT=json the terminal gets the
 * JSON log as before and no progress line. Ctrl-C is typed into the terminal, as a person stops
 * it. Skipped, with the reason printed, when `script` is not installed.
 */
import { existsSync } from 'node:fs';
import { readFile } from 'node:fs/promises';
import { spawn, type ChildProcess } from 'node:child_process';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { freePort } from '../services/db/embedded.ts';
import { outputFor, type LogFormat } from '../services/cli/terminal.ts';
import { demoProgressLine, unitsCaughtUp } from '../services/cli/demo-feed.ts';
import { dataDirs } from './helpers/data-dirs.ts';

const BIN = fileURLToPath(new URL('../bin/cansight.mjs', import.meta.url));
const SCRIPT = '/usr/bin/script';
const hasScript = existsSync(SCRIPT);
if (!hasScript) console.log(`terminal tests skipped: ${SCRIPT} is not installed (util-linux)`);

const dirs = dataDirs('cansight-tty-');
const running: ChildProcess[] = [];
afterAll(async () => {
  for (const c of running) if (c.exitCode === null && c.signalCode === null) c.stdin?.write('\x03\x03');
  await dirs.removeAll();
});

describe('the output a command chooses', () => {
  const cases: [LogFormat, boolean, boolean, ReturnType<typeof outputFor>][] = [
    ['auto', true, true, { log: 'file', file: 'F', live: true }],
    ['auto', true, false, { log: 'pretty', file: null, live: false }],
    ['auto', false, true, { log: 'json', file: null, live: false }],
    ['auto', false, false, { log: 'json', file: null, live: false }],
    ['json', true, true, { log: 'json', file: null, live: false }],
    ['json', false, true, { log: 'json', file: null, live: false }],
    ['pretty', true, true, { log: 'pretty', file: null, live: true }],
    ['pretty', false, true, { log: 'pretty', file: null, live: false }],
  ];
  for (const [format, tty, announce, want] of cases) {
    it(`LOG_FORMAT=${format}, stdout ${tty ? 'a terminal' : 'not a terminal'}, ${announce ? 'cansight start' : 'another command'}: ${want.log}${want.live ? ', header and progress line' : ''}`, () => {
      expect(outputFor({ format, stdoutIsTTY: tty, announce, logFile: 'F' })).toEqual(want);
    });
  }
});

describe('the demo progress line', () => {
  const sent = { rings: 412_345, fromMs: 0, toMs: 100, sentToMs: 38, lastMsByUnit: { a: 30, b: 38 }, backfilled: false };
  it('says how much of the history is sent, rings stored and analysed, units caught up and the time left', () => {
    expect(demoProgressLine({ sent, analysed: 300_001, caughtUp: 0, units: 2, leftS: 200 })).toBe('demo history: 38 % sent · 412,345 rings stored · 300,001 analysed · 0 of 2 units caught up · about 3 min left');
    expect(demoProgressLine({ sent: { ...sent, backfilled: true }, analysed: 500_000, caughtUp: 1, units: 2, leftS: 12 })).toBe('demo history: all sent · 412,345 rings stored · 412,345 analysed · 1 of 2 units caught up · about 10 s left');
    expect(demoProgressLine({ sent, analysed: 0, caughtUp: 0, units: 2, leftS: null })).toMatch(/· estimating the time left$/);
  });
  it('counts a unit caught up once the whole history is sent and analysed up to its newest ring', () => {
    const marks = new Map([['a', 30], ['b', 37]]);
    expect(unitsCaughtUp(sent, marks, ['a', 'b'])).toBe(0);
    expect(unitsCaughtUp({ ...sent, backfilled: true }, marks, ['a', 'b'])).toBe(1);
    expect(unitsCaughtUp({ ...sent, backfilled: true }, new Map([['a', 30], ['b', 38]]), ['a', 'b'])).toBe(2);
  });
});

interface Session {
  child: ChildProcess;
  /** Everything drawn on the terminal so far. */
  screen(): string;
  exited: Promise<number | null>;
  /** Types on the terminal's keyboard. */
  type(keys: string): void;
}

/** `cansight start ARGS` in a pseudo-terminal of its own. */
function inTerminal(args: string[], env: Record<string, string>): Session {
  const full: Record<string, string> = { ...(process.env as Record<string, string>), LOG_LEVEL: 'info', ...env };
  delete full.DATABASE_URL;
  delete full.LOG_FORMAT;
  Object.assign(full, env);
  // `exec`: the shell that `script` starts ($SHELL, or /bin/sh where that is unset) becomes the
  // command, so Ctrl-C reaches cansight alone; a shell left waiting (dash) would die of it first.
  const command = 'exec ' + [process.execPath, BIN, 'start', ...args].map((a) => `'${a.replace(/'/g, `'\\''`)}'`).join(' ');
  const child = spawn(SCRIPT, ['--quiet', '--flush', '--return', '--command', command, '/dev/null'], { env: full, stdio: ['pipe', 'pipe', 'pipe'] });
  running.push(child);
  let out = '';
  child.stdout!.on('data', (b) => (out += b));
  child.stderr!.on('data', (b) => (out += b));
  const exited = new Promise<number | null>((r) => child.once('exit', (code) => r(code)));
  return { child, screen: () => out, exited, type: (keys) => void child.stdin!.write(keys) };
}

async function until(what: string, check: () => boolean, session: Session, timeoutMs = 150_000): Promise<void> {
  const end = Date.now() + timeoutMs;
  while (!check()) {
    if (Date.now() > end) throw new Error(`timed out waiting for ${what}; the terminal shows:\n${session.screen()}`);
    await new Promise((r) => setTimeout(r, 200));
  }
}

/** The lines of the terminal as they stay on screen: each redraw (carriage return, clear line) replaces the line before. */
function finalLines(screen: string): string[] {
  return screen.split('\n').map((l) => l.replace(/\r$/, '').split(/\r\x1b\[2K|\r/).at(-1) ?? '');
}

describe.skipIf(!hasScript)('cansight start on a terminal', () => {
  it('shows the header once, then one progress line until the demo is live, with the log in the file it names', async () => {
    const dir = await dirs.make();
    const port = await freePort();
    const s = inTerminal([], { CANSIGHT_DATA_DIR: path.join(dir, 'pg'), PORT: String(port), CANSIGHT_PG_PORT: String(await freePort()), CANSIGHT_DEMO_DAYS: '1' });
    await until('the demo to be live', () => s.screen().includes('demo live:'), s);
    const screen = s.screen();
    // Header: URL, admin key, where data and log are kept; written once.
    expect(screen.split(`Cansight is running at http://127.0.0.1:${port}`).length - 1).toBe(1);
    const key = /admin key \(shown once, store it now\): (csk_[A-Za-z0-9_-]+)/.exec(screen)?.[1];
    expect(key, screen).toBeDefined();
    expect(screen).toContain(`data: ${path.join(dir, 'pg')} (embedded PostgreSQL, kept between runs;`);
    const logFile = path.join(dir, 'cansight.log');
    expect(screen).toContain(`log: ${logFile} (read it with: npx pino-pretty < ${logFile})`);
    // No JSON log on the terminal; the progress line is redrawn in place, after the header.
    expect(screen).not.toContain('{"level"');
    const redraws = screen.split('\r\x1b[2K').length - 1;
    expect(redraws).toBeGreaterThan(2);
    const progress = [...screen.matchAll(/demo history: [^\r\n]*/g)].map((m) => m[0]);
    expect(progress.length).toBeGreaterThan(0);
    expect(screen.indexOf('demo history:')).toBeGreaterThan(screen.indexOf('admin key'));
    expect(progress.some((l) => /\d+ % sent|all sent/.test(l) && /[\d,]+ rings stored · [\d,]+ analysed · \d of 6 units caught up/.test(l)), progress.join('\n')).toBe(true);
    // What stays on screen: the header, and the line saying the demo is live (the progress line is gone).
    const lines = finalLines(screen).filter(Boolean);
    expect(lines.some((l) => l.startsWith('demo history:'))).toBe(false);
    expect(lines.at(-1)).toMatch(/^demo live: [\d,]+ rings of history stored and analysed in \d+ (s|min \d\d s); new rings arrive every 5 s\.$/);
    // The log is in the file, as JSON lines.
    const log = (await readFile(logFile, 'utf8')).trim().split('\n').map((l) => JSON.parse(l) as { msg: string; level: number });
    expect(log.map((l) => l.msg)).toEqual(expect.arrayContaining(['embedded PostgreSQL started', 'listening', 'demo history stored']));
    expect(log.filter((l) => l.level >= 50)).toEqual([]);
    // The key in the header opens the API.
    const units = await fetch(`http://127.0.0.1:${port}/v1/units`, { headers: { authorization: `Bearer ${key}` } });
    expect(((await units.json()) as { units: unknown[] }).units).toHaveLength(6);
    // Ctrl-C on the terminal stops it cleanly.
    s.type('\x03');
    expect(await s.exited).toBe(0);
    expect(finalLines(s.screen()).filter(Boolean).at(-1)).toBe('Cansight stopped.');
  }, 200_000);

  it('with LOG_FORMAT=json writes the JSON log on the terminal as before, with the header and no progress line or log file', async () => {
    const dir = await dirs.make();
    const port = await freePort();
    const s = inTerminal(['--no-demo'], { CANSIGHT_DATA_DIR: path.join(dir, 'pg'), PORT: String(port), CANSIGHT_PG_PORT: String(await freePort()), LOG_FORMAT: 'json' });
    await until('the worker to start', () => s.screen().includes('"msg":"worker started"'), s);
    s.type('\x03');
    expect(await s.exited).toBe(0);
    // The terminal echoes the Ctrl-C typed as ^C before the next line.
    const lines = s.screen().split(/\r?\n/).map((l) => l.replace(/^\^C/, '')).filter(Boolean);
    const json = lines.filter((l) => l.startsWith('{'));
    for (const l of json) expect(() => JSON.parse(l), l).not.toThrow();
    expect(json.map((l) => JSON.parse(l).msg)).toEqual(expect.arrayContaining(['embedded PostgreSQL started', 'listening', 'stopping', 'embedded PostgreSQL stopped']));
    const others = lines.filter((l) => !l.startsWith('{'));
    expect(others[0]).toBe(`Cansight is running at http://127.0.0.1:${port}  (API reference: http://127.0.0.1:${port}/docs)`);
    expect(others.some((l) => l.startsWith('admin key (shown once, store it now): csk_'))).toBe(true);
    expect(others.some((l) => l.startsWith('log:'))).toBe(false);
    expect(s.screen()).not.toContain('\x1b[2K');
    expect(s.screen()).not.toMatch(/starting:|demo history:|Cansight stopped\./);
    expect(existsSync(path.join(dir, 'cansight.log'))).toBe(false);
  }, 120_000);
});
