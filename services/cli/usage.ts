/**
 * The `cansight` command's sub-commands in one table: for each, the options its parser accepts
 * (the very object handed to node:util parseArgs), what each option means, and the help text
 * made from them; and the error for a wrong invocation. `cansight --help` lists every
 * sub-command with all its options; `cansight SUB --help` explains one. Nothing here parses or
 * runs a command.
 */
import type { ParseArgsConfig } from 'node:util';
import { SCENARIOS } from '../sim/scenarios.ts';

export class UsageError extends Error {}

type Options = NonNullable<ParseArgsConfig['options']>;

export interface CommandSpec {
  /** The words after `cansight`, e.g. "keys create". */
  name: string;
  /** What follows the name before the options, e.g. "FILE". */
  operands?: string;
  /** One or two lines: what the command does. */
  summary: string;
  /** The options its parser accepts, passed to parseArgs as they are. */
  options: Options;
  /** Per option: its value's placeholder (none for a switch) and its meaning. */
  optionHelp: Record<string, { value?: string; required?: boolean; text: string }>;
  /** Further lines printed after the options by `cansight SUB --help`. */
  more?: () => string;
}

const spec = <T extends CommandSpec>(s: T) => s;

export const COMMANDS = {
  start: spec({
    name: 'start',
    summary: 'database (embedded unless DATABASE_URL), migrations, ingest + worker + API\nin one process on HOST:PORT, with the invented demo fleet',
    options: { 'no-demo': { type: 'boolean', default: false } },
    optionHelp: { 'no-demo': { text: 'start without the demo units and their history' } },
  }),
  api: spec({ name: 'api', summary: 'the HTTP API alone (reads, alert actions, pictures, dashboard), for scale-out', options: {}, optionHelp: {} }),
  ingest: spec({ name: 'ingest', summary: 'the ring endpoints alone, for scale-out', options: {}, optionHelp: {} }),
  worker: spec({ name: 'worker', summary: 'the analysis worker alone (baselines, drift, alerts, webhooks), for scale-out', options: {}, optionHelp: {} }),
  migrate: spec({ name: 'migrate', summary: 'apply pending database migrations', options: {}, optionHelp: {} }),
  keysCreate: spec({
    name: 'keys create',
    summary: 'make an API key (printed once)',
    options: { role: { type: 'string' }, units: { type: 'string' }, label: { type: 'string' } },
    optionHelp: {
      role: { value: 'R', required: true, text: 'ingest, viewer, operator or admin' },
      units: { value: 'a,b', text: 'limit the key to these unit ids (default: every unit)' },
      label: { value: 'TEXT', text: 'a note kept with the key, shown by keys list' },
    },
  }),
  keysList: spec({ name: 'keys list', summary: 'list the keys (key id, role, units, use; never the key)', options: {}, optionHelp: {} }),
  keysRevoke: spec({ name: 'keys revoke', operands: 'ID|KEY-ID', summary: 'revoke a key by its id or its key id (key-…, see keys list)', options: {}, optionHelp: {} }),
  keysRotateAdmin: spec({
    name: 'keys rotate-admin',
    summary: 'make a new admin key (printed once) and revoke the old one in the same step',
    options: { old: { type: 'string' }, label: { type: 'string' } },
    optionHelp: {
      old: { value: 'ID|KEY-ID', text: 'the admin key to replace (default: the one CANSIGHT_ADMIN_KEY names)' },
      label: { value: 'TEXT', text: 'a note kept with the new key, shown by keys list' },
    },
  }),
  import: spec({
    name: 'import',
    operands: 'FILE',
    summary: 'load a CSV or NDJSON history file through the ingest checks; the format\ncomes from the extension (.csv, .ndjson, .jsonl) or the first character',
    options: { unit: { type: 'string' }, format: { type: 'string' }, register: { type: 'string' }, wait: { type: 'boolean', default: false } },
    optionHelp: {
      wait: { text: 'after the upload, wait until the analysis of the units imported has caught up\nwith their rings, showing how far it has come (a worker must be running)' },
      unit: { value: 'U', text: 'the unit of the rings: needed for CSV (unless UNITFILE has one unit); for\nNDJSON it fills in or overrides each line\'s unitId' },
      format: { value: 'csv|ndjson', text: 'the file\'s format, when its name does not say' },
      register: { value: 'UNITFILE', text: 'first register the units of UNITFILE (POST /v1/units bodies,\nas cansight demo writes them), refusing one registered differently' },
    },
  }),
  demo: spec({
    name: 'demo',
    summary: 'write a simulated scenario (NDJSON or CSV, by the file\'s extension), with\nFILE.unit.json for import --register and the ground truth in FILE.truth.json',
    options: {
      scenario: { type: 'string' }, out: { type: 'string' }, days: { type: 'string' }, seed: { type: 'string' },
      unit: { type: 'string' }, end: { type: 'string' }, 'steady-interval': { type: 'string' },
    },
    optionHelp: {
      scenario: { value: 'NAME', required: true, text: 'which scenario (listed below)' },
      out: { value: 'FILE', required: true, text: 'FILE.ndjson or .jsonl: one ring per line with unitId; FILE.csv: one unit' },
      days: { value: 'N', text: 'days of rings before the end (default per scenario)' },
      seed: { value: 'S', text: 'the simulator\'s seed, 0 to 4294967295 (default 1)' },
      unit: { value: 'ID', text: 'write only this unit of the scenario (a CSV file holds one)' },
      end: { value: 'TIME', text: 'when the rings end, RFC 3339 with offset (e.g. 2026-03-01T00:00:00Z): the last\nring is at TIME, or at the last ring time before it off the steady interval;\ndefault now, rounded down to the steady interval. The same --seed and --end\nwrite the same files' },
      'steady-interval': { value: 'SECONDS', text: 'seconds between rings in steady running (default 60; starts\nand stops are written at 1 s)' },
    },
    more: () => `then: cansight import --register FILE.unit.json FILE\nscenarios:\n${Object.entries(SCENARIOS).map(([k, v]) => `  ${k.padEnd(12)} ${v.description}`).join('\n')}`,
  }),
  report: spec({
    name: 'report',
    summary: 'write the pre-outage review of a unit (as GET /v1/units/:unitId/review)',
    options: { unit: { type: 'string' }, out: { type: 'string' }, from: { type: 'string' }, to: { type: 'string' }, csv: { type: 'boolean', default: false } },
    optionHelp: {
      unit: { value: 'U', required: true, text: 'the unit' },
      out: { value: 'FILE.html', required: true, text: 'where to write it (FILE.csv with --csv)' },
      from: { value: 'T', text: 'start of the reviewed window, RFC 3339 (default 90 days before --to)' },
      to: { value: 'T', text: 'end of the reviewed window, RFC 3339 (default now)' },
      csv: { text: 'write the review\'s tables as CSV instead of printable HTML' },
    },
  }),
} satisfies Record<string, CommandSpec>;

export type CommandName = keyof typeof COMMANDS;

/** The asked-for help of a command: `--help` or `-h` among its arguments (before a `--`). */
export function wantsHelp(args: readonly string[]): boolean {
  for (const a of args) {
    if (a === '--') return false;
    if (a === '--help' || a === '-h') return true;
  }
  return false;
}

const optionWord = (name: string, o: CommandSpec['optionHelp'][string]) => `--${name}${o.value ? ' ' + o.value : ''}`;

const LINE = 80;

/**
 * `cansight import FILE [--unit U] [--format csv|ndjson] [--register UNITFILE]`, broken before
 * an option where a line would pass 80 characters (continued under the first option).
 */
export function synopsis(c: CommandSpec, lead = 0): string {
  let line = `cansight ${c.name}${c.operands ? ' ' + c.operands : ''}`;
  const hang = ' '.repeat(lead + line.length + 1);
  const lines: string[] = [];
  for (const name of Object.keys(c.options)) {
    const o = c.optionHelp[name];
    const w = o.required ? optionWord(name, o) : `[${optionWord(name, o)}]`;
    if (lead + line.length + 1 + w.length > LINE && line.trim().includes('--')) {
      lines.push(line);
      line = hang.slice(lead) + w;
    } else line += ' ' + w;
  }
  lines.push(line);
  return lines.join('\n' + ' '.repeat(lead));
}

const indent = (text: string, by: string) => text.split('\n').map((l) => by + l).join('\n');

/** What `cansight SUB --help` prints: the synopsis, what it does, each option, and any more. */
export function commandHelp(c: CommandSpec): string {
  const lines = [`usage: ${synopsis(c, 'usage: '.length)}`, indent(c.summary, '  ')];
  const names = Object.keys(c.options);
  if (names.length) {
    lines.push('options:');
    const width = Math.max(...names.map((n) => optionWord(n, c.optionHelp[n]).length)) + 2;
    for (const n of names) {
      const o = c.optionHelp[n];
      const [first, ...rest] = o.text.split('\n');
      lines.push(`  ${optionWord(n, o).padEnd(width)}${first}`);
      for (const r of rest) lines.push(`  ${' '.repeat(width)}${r}`);
    }
  }
  if (c.more) lines.push(c.more());
  return lines.join('\n');
}

/** The help of every command whose name begins with `prefix` (e.g. "keys"). */
export function helpFor(prefix: string): string | null {
  const found = Object.values(COMMANDS).filter((c) => c.name === prefix || c.name.startsWith(prefix + ' '));
  return found.length ? found.map(commandHelp).join('\n\n') : null;
}

/** `cansight --help`: every sub-command with all its options, and what it does beneath. */
export function usage(): string {
  const blocks = Object.values(COMMANDS).map((c) => `  ${synopsis(c, 2)}\n${indent(c.summary, '      ')}`);
  return `cansight: exhaust-ring monitoring for gas turbine fleets

usage:
${blocks.join('\n')}

\`cansight SUB --help\` explains one sub-command and each of its options.
Configuration is read from environment variables; see README.md.
Cansight advises; the turbine's own protection and the site's procedures govern.`;
}
