/**
 * What a person at a terminal sees from a `cansight` command, and where its log goes.
 *
 * The choice (outputFor) depends only on LOG_FORMAT and on whether stdout is a terminal:
 * - LOG_FORMAT=json, or stdout not a terminal (a pipe, a file, a service manager): the log is
 *   pino JSON on stdout, one line per event, and `cansight start` prints its plain header lines
 *   among them;
 * - LOG_FORMAT=pretty: the log in readable one-line form on stdout (pino-pretty), terminal or not;
 * - otherwise, on a terminal: `cansight start` shows a short header (URL, admin key, where data and
 *   log are kept) and one progress line redrawn in place, and writes its log as JSON to a file
 *   named in the header (CANSIGHT_LOG_FILE, by default beside the data directory), showing only
 *   warnings and errors on the terminal, readably; the other commands write their log readably.
 *
 * A Terminal owns stdout for people: lines said go above the progress line, and readable log
 * lines go through it too, so the progress line is never torn.
 */
import path from 'node:path';
import { pino, type DestinationStream } from 'pino';
import { prettyFactory } from 'pino-pretty';
import type { Config } from '../db/config.ts';

export type LogFormat = 'auto' | 'json' | 'pretty';

export interface Output {
  /** json: pino JSON on stdout; pretty: readable lines on stdout; file: JSON to `file`, warnings and errors readable on stdout. */
  log: 'json' | 'pretty' | 'file';
  file: string | null;
  /** Header and progress line drawn in place (a person at a terminal watching `cansight start`). */
  live: boolean;
}

/**
 * The output of a command. `announce`: the command is `cansight start`, which has a header and a
 * progress line for a person; `logFile` is where its log goes on a terminal.
 */
export function outputFor(o: { format: LogFormat; stdoutIsTTY: boolean; announce: boolean; logFile: string }): Output {
  const live = o.announce && o.stdoutIsTTY && o.format !== 'json';
  if (o.format === 'json') return { log: 'json', file: null, live };
  if (o.format === 'pretty') return { log: 'pretty', file: null, live };
  if (!o.stdoutIsTTY) return { log: 'json', file: null, live };
  return o.announce ? { log: 'file', file: o.logFile, live } : { log: 'pretty', file: null, live };
}

/** Where `cansight start` on a terminal writes its log: CANSIGHT_LOG_FILE, else beside the data directory. */
export function logFileOf(config: Pick<Config, 'logFile' | 'dataDir'>): string {
  return config.logFile ?? path.join(path.dirname(path.resolve(config.dataDir)), 'cansight.log');
}

interface Sink {
  write(s: string): unknown;
  isTTY?: boolean;
  columns?: number;
}

const CLEAR_LINE = '\r\x1b[2K';

export class Terminal {
  private line = '';
  private shown = false;

  constructor(
    private readonly out: Sink,
    readonly output: Output,
  ) {}

  get live(): boolean {
    return this.output.live;
  }

  /** Lines for people (the header, a closing line): above the progress line on a terminal. */
  say(text: string): void {
    this.hide();
    this.out.write(text.endsWith('\n') ? text : text + '\n');
    this.draw();
  }

  /** Sets the progress line; drawn in place on a terminal, not written otherwise. */
  progress(text: string): void {
    if (!this.live) return;
    this.line = text;
    this.hide();
    this.draw();
  }

  /** Ends the progress line, leaving `last` (if given) on the screen. */
  endProgress(last?: string): void {
    this.hide();
    this.line = '';
    if (last) this.say(last);
  }

  /** The pino destination of this output's log (undefined: pino's own stdout destination). */
  logDestination(level: string): DestinationStream | undefined {
    const o = this.output;
    if (o.log === 'json') return undefined;
    if (o.log === 'pretty') return this.readable();
    const file = pino.destination({ dest: o.file!, mkdir: true, sync: true });
    return pino.multistream([
      { level: level as pino.Level, stream: file },
      { level: 'warn', stream: this.readable() },
    ]);
  }

  /** A destination writing each JSON log line in readable one-line form (pino-pretty) through say(). */
  private readable(): DestinationStream {
    const pretty = prettyFactory({ colorize: Boolean(this.out.isTTY), translateTime: 'SYS:HH:MM:ss', ignore: 'pid,hostname,app', singleLine: true });
    return { write: (line: string) => this.say(pretty(line)) };
  }

  private hide(): void {
    if (this.shown) this.out.write(CLEAR_LINE);
    this.shown = false;
  }

  private draw(): void {
    if (!this.live || !this.line) return;
    // Never wider than the terminal: a wrapped line could not be redrawn in place.
    const width = Math.max(20, (this.out.columns || 100) - 1);
    this.out.write(this.line.length > width ? this.line.slice(0, width - 1) + '…' : this.line);
    this.shown = true;
  }
}

/** The terminal of this process's stdout for a command. */
export function openTerminal(config: Pick<Config, 'logFormat' | 'logFile' | 'dataDir'>, announce: boolean, out: Sink = process.stdout): Terminal {
  return new Terminal(out, outputFor({ format: config.logFormat, stdoutIsTTY: Boolean(out.isTTY), announce, logFile: logFileOf(config) }));
}
