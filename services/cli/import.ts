/**
 * `cansight import FILE [--unit U] [--format csv|ndjson] [--register UNITFILE]`: loads a history
 * file of rings through the same validation and write path as the HTTP endpoints, streaming the
 * file in chunks. CSV holds one unit (--unit is required); NDJSON lines carry unitId, which
 * --unit fills in where missing and overrides where present. The format comes from the extension
 * (.csv; .ndjson, .jsonl) or, failing that, from the first character of the file.
 *
 * --register UNITFILE first registers the units the file describes: a JSON object in the body
 * shape of POST /v1/units, or an array of them (as `cansight demo` writes FILE.unit.json). It is
 * checked as POST /v1/units checks a body (the same schema, then the same consistency checks).
 * A unit not yet registered is created; one registered with the same name, site and
 * configuration (the version in force now) is left as it is; one registered differently stops
 * the import before anything is written. For a CSV file holding the one unit of UNITFILE,
 * --unit may be left out.
 *
 * Commits every COMMIT_EVERY rings, so an interrupted import keeps what it committed and a
 * re-run counts those rings as duplicates. A progress bar (bytes read of the file's size) goes
 * to stderr when it is a terminal; the summary line goes to stdout.
 */
import { createReadStream } from 'node:fs';
import { open, readFile, stat } from 'node:fs/promises';
import path from 'node:path';
import { parseArgs } from 'node:util';
import { HttpError, toErrorReply } from '../http/errors.ts';
import { unitFromBody, validateUnitBody } from '../api/unit-body.ts';
import type { UnitConfig } from '../core/types.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import { isDatabaseUnavailable, type Pool } from '../db/pool.ts';
import { createUnitsRepository, DuplicateUnitError, type UnitIdentity, type UnitRecord } from '../db/units.ts';
import { analysisProgress } from '../db/progress.ts';
import { IngestRun, type IngestTally } from '../ingest/run.ts';
import { ingestCsv, ingestNdjson } from '../ingest/streams.ts';
import { thermocoupleCounter } from '../ingest/validate.ts';
import { COMMANDS, synopsis } from './usage.ts';

export const COMMIT_EVERY = 100_000;
const SHOWN_REASONS = 5;
const SHOWN_DIFFERENCES = 5;
const IMPORT_USAGE = `usage: ${synopsis(COMMANDS.import)}`;

export interface ImportIo {
  stdout: (line: string) => void;
  stderr: NodeJS.WriteStream | { isTTY?: boolean; write(s: string): unknown; columns?: number };
}

const defaultIo = (): ImportIo => ({ stdout: (l) => process.stdout.write(l + '\n'), stderr: process.stderr });

async function sniff(file: string): Promise<'csv' | 'ndjson'> {
  const ext = path.extname(file).toLowerCase();
  if (ext === '.csv') return 'csv';
  if (ext === '.ndjson' || ext === '.jsonl') return 'ndjson';
  const fh = await open(file, 'r');
  try {
    const { buffer, bytesRead } = await fh.read(Buffer.alloc(512), 0, 512, 0);
    const head = buffer.subarray(0, bytesRead).toString('utf8').replace(/^\uFEFF/, '').trimStart();
    return head.startsWith('{') ? 'ndjson' : 'csv';
  } finally {
    await fh.close();
  }
}

function bar(done: number, total: number, rings: number, width = 30): string {
  const f = total > 0 ? Math.min(1, done / total) : 1;
  const filled = Math.round(f * width);
  const mib = (b: number) => (b / 1048576).toFixed(1);
  return `\r[${'#'.repeat(filled)}${'.'.repeat(width - filled)}] ${(f * 100).toFixed(0).padStart(3)}%  ${mib(done)}/${mib(total)} MiB  ${rings.toLocaleString('en')} rings`;
}

function summary(file: string, t: IngestTally, kind: 'csv' | 'ndjson'): string[] {
  const where = kind === 'csv' ? 'row' : 'line';
  const lines = [`${path.basename(file)}: accepted ${t.accepted}, duplicates ${t.duplicates}, rejected ${t.rejectedCount}`];
  for (const r of t.rejected.slice(0, SHOWN_REASONS)) lines.push(`  ${where} ${r.index}: ${r.field} ${r.reason}`);
  if (t.rejectedCount > SHOWN_REASONS) lines.push(`  … and ${t.rejectedCount - SHOWN_REASONS} more rejected`);
  return lines;
}

/** A unit to register: who it is and the configuration it starts with. */
interface UnitToRegister {
  identity: UnitIdentity;
  config: UnitConfig;
}

/** A refusal of the unit file, said to the person running the command. */
class UnitFileError extends Error {}

/**
 * The units a --register file describes, each checked as POST /v1/units checks its body: the
 * route's TypeBox schema with the API's strict body options (no coercion, unknown fields
 * refused), the API's wording of the first problem, then the consistency checks of
 * services/core/unit-config.ts; temperatureUnit defaults to "C" as in the route.
 */
async function readUnitFile(file: string): Promise<UnitToRegister[]> {
  let text: string;
  try {
    text = await readFile(file, 'utf8');
  } catch (err) {
    throw new UnitFileError(`cannot read ${file}: ${(err as NodeJS.ErrnoException).code === 'ENOENT' ? 'no such file' : (err as Error).message}`);
  }
  let parsed: unknown;
  try {
    parsed = JSON.parse(text.replace(/^\uFEFF/, ''));
  } catch (err) {
    throw new UnitFileError(`${file} is not JSON (${(err as Error).message}); it should hold the body of POST /v1/units, as cansight demo writes it beside the rings (FILE.unit.json)`);
  }
  const many = Array.isArray(parsed);
  const items = many ? (parsed as unknown[]) : [parsed];
  if (items.length === 0) throw new UnitFileError(`${file} holds an empty list; give at least one unit (the body of POST /v1/units)`);
  const units: UnitToRegister[] = [];
  const seen = new Set<string>();
  items.forEach((item, i) => {
    const id = item !== null && typeof item === 'object' && typeof (item as { id?: unknown }).id === 'string' ? (item as { id: string }).id : undefined;
    const where = many ? `${file}, unit ${i + 1} of ${items.length}${id ? ` (${id})` : ''}` : file;
    if (item === null || typeof item !== 'object' || Array.isArray(item)) {
      throw new UnitFileError(`${where}: must be a JSON object with the fields of POST /v1/units (id, name, site, ratedPowerMw, thermocouples, chambers, swirl, ...)${many ? '' : ', or an array of such objects'}`);
    }
    let unit: UnitToRegister;
    try {
      unit = unitFromBody(validateUnitBody(item));
    } catch (err) {
      // The route's own refusal (400 for the schema, 422 for an inconsistent configuration), in its words.
      const reply = toErrorReply(err);
      const details = (reply.body.details ?? []) as { field: string; reason: string }[];
      const said = details.map((d) => `field "${d.field}": ${d.reason}`).join('; ') || reply.body.message;
      throw new UnitFileError(`${where}: ${reply.status === 422 ? 'the unit configuration is inconsistent: ' : ''}${said}`);
    }
    const unitId = unit.identity.id;
    if (seen.has(unitId)) throw new UnitFileError(`${where}: unit ${unitId} is listed twice; list each unit once`);
    seen.add(unitId);
    units.push(unit);
  });
  return units;
}

/** Leaf values of a JSON value by dotted path (array items by index), for comparing configurations. */
function leaves(value: unknown, prefix: string, out: Map<string, string>): Map<string, string> {
  if (value !== null && typeof value === 'object') {
    for (const [k, v] of Object.entries(value as Record<string, unknown>)) leaves(v, prefix ? `${prefix}.${k}` : k, out);
  } else if (value !== undefined) {
    out.set(prefix, JSON.stringify(value));
  }
  return out;
}

/** Where a registered unit differs from the unit file: name, site and the configuration in force now. */
function differences(registered: UnitRecord, wanted: UnitToRegister): string[] {
  const a = leaves({ name: registered.name, site: registered.site, family: registered.family ?? null, ...registered.config }, '', new Map());
  const b = leaves({ name: wanted.identity.name, site: wanted.identity.site, family: wanted.identity.family ?? null, ...wanted.config }, '', new Map());
  const paths = [...new Set([...a.keys(), ...b.keys()])].sort();
  return paths.filter((p) => a.get(p) !== b.get(p)).map((p) => `${p} registered ${a.get(p) ?? '(not set)'}, in the file ${b.get(p) ?? '(not set)'}`);
}

/**
 * Registers the units of a --register file that are not registered yet. Refuses, before
 * creating any, when one is registered with a different name, site or configuration. Returns
 * the lines to report.
 */
async function registerUnits(pool: Pool, file: string, wanted: UnitToRegister[], logger: Logger): Promise<string[]> {
  const repo = createUnitsRepository(pool);
  const refuse = (u: UnitToRegister, found: UnitRecord): never => {
    const diff = differences(found, u);
    const shown = diff.slice(0, SHOWN_DIFFERENCES).join('; ') + (diff.length > SHOWN_DIFFERENCES ? `; and ${diff.length - SHOWN_DIFFERENCES} more` : '');
    throw new UnitFileError(
      `unit ${u.identity.id} is already registered and differs from ${file}: ${shown}. Nothing was changed or imported. ` +
        `To change the registered unit use PATCH /v1/units/${u.identity.id}; to keep it, give the file's unit another id and import with --unit <that id>.`,
    );
  };
  const existing = new Map<string, UnitRecord>();
  for (const u of wanted) {
    const found = await repo.get(u.identity.id);
    if (!found) continue;
    if (differences(found, u).length) refuse(u, found);
    existing.set(u.identity.id, found);
  }
  const lines: string[] = [];
  for (const u of wanted) {
    const { id, name, site } = u.identity;
    if (!existing.has(id)) {
      try {
        await repo.create(u.identity, u.config, 'import');
        logger.info({ unitId: id, file }, 'import: unit registered');
        lines.push(`registered unit ${id} (${name}, ${site}) from ${path.basename(file)}`);
        continue;
      } catch (err) {
        if (!(err instanceof DuplicateUnitError)) throw err;
        // Registered meanwhile by someone else: the same check as for one found at the start.
        const found = (await repo.get(id))!;
        if (differences(found, u).length) refuse(u, found);
      }
    }
    lines.push(`unit ${id} is already registered with the configuration in ${path.basename(file)}`);
  }
  return lines;
}

export async function importCommand(args: string[], ctx: { pool: Pool; config: Config; logger: Logger; waitStallMs?: number }, io: ImportIo = defaultIo()): Promise<number> {
  const fail = (message: string, code: number) => {
    io.stderr.write(`cansight import: ${message}\n`);
    return code;
  };
  let parsed;
  try {
    parsed = parseArgs({ args, allowPositionals: true, strict: true, options: COMMANDS.import.options });
  } catch (err) {
    return fail(`${(err as Error).message}\n${IMPORT_USAGE}`, 2);
  }
  const { positionals, values } = parsed;
  if (positionals.length !== 1) return fail(`name exactly one file of rings: ${IMPORT_USAGE}`, 2);
  const file = positionals[0];
  let unit = values.unit;
  if (unit !== undefined && !/^[a-z0-9-]{1,40}$/.test(unit)) return fail(`--unit "${unit}" is not a unit id (lower-case letters, digits and dashes, 1–40)`, 2);
  if (values.format !== undefined && values.format !== 'csv' && values.format !== 'ndjson') return fail(`--format "${values.format}" is not csv or ndjson`, 2);
  let toRegister: UnitToRegister[] | undefined;
  if (values.register !== undefined) {
    try {
      toRegister = await readUnitFile(values.register);
    } catch (err) {
      if (err instanceof UnitFileError) return fail(`--register ${err.message}`, 2);
      throw err;
    }
    const ids = toRegister.map((u) => u.identity.id);
    if (unit !== undefined && !ids.includes(unit)) {
      return fail(`--unit ${unit} is not a unit of ${values.register} (${ids.join(', ')}); leave --unit out or name one of them`, 2);
    }
  }

  let size: number;
  try {
    const st = await stat(file);
    if (!st.isFile()) return fail(`${file} is not a file`, 2);
    size = st.size;
  } catch (err) {
    return fail(`cannot read ${file}: ${(err as NodeJS.ErrnoException).code === 'ENOENT' ? 'no such file' : (err as Error).message}`, 2);
  }
  const kind = (values.format as 'csv' | 'ndjson' | undefined) ?? (await sniff(file));
  // A CSV file holds one unit: the one unit of the --register file when --unit is left out.
  if (kind === 'csv' && unit === undefined && toRegister?.length === 1) unit = toRegister[0].identity.id;
  if (kind === 'csv' && unit === undefined) {
    return fail(`a CSV file holds the rings of one unit; name it with --unit U${toRegister ? ` (${values.register} has ${toRegister.length} units)` : ''}`, 2);
  }

  if (toRegister) {
    try {
      for (const line of await registerUnits(ctx.pool, values.register!, toRegister, ctx.logger)) io.stdout(line);
    } catch (err) {
      if (err instanceof UnitFileError) return fail(err.message, 1);
      if (isDatabaseUnavailable(err)) return fail(`the database is unavailable (${(err as Error).message}); no rings were imported.`, 1);
      throw err;
    }
  }

  const tty = Boolean(io.stderr.isTTY);
  let lastDraw = 0;
  let bytesRead = 0;
  const run = new IngestRun(ctx.pool, {
    chunkRings: ctx.config.ingest.chunkRings,
    commitEveryRings: COMMIT_EVERY,
    onCommit: (t) => ctx.logger.debug({ accepted: t.accepted, duplicates: t.duplicates }, 'import: committed'),
  });
  const draw = (force = false) => {
    if (!tty) return;
    const now = Date.now();
    if (!force && now - lastDraw < 100) return;
    lastDraw = now;
    io.stderr.write(bar(bytesRead, size, run.tally.accepted + run.tally.duplicates + run.pending));
  };

  const started = Date.now();
  try {
    let counter;
    if (unit !== undefined) {
      const versions = await run.unitVersions(unit);
      if (versions.length === 0) {
        await run.abort();
        return fail(`no unit ${unit} is registered; register it first (POST /v1/units, or --register UNITFILE)`, 1);
      }
      counter = thermocoupleCounter(versions);
    }
    const source = createReadStream(file, { highWaterMark: 256 * 1024 });
    const options = {
      run,
      nowMs: Date.now(),
      futureToleranceS: ctx.config.ingest.futureToleranceS,
      bounds: ctx.config.ingest.bounds,
      lineLimitBytes: ctx.config.ingest.lineLimitBytes,
      onBytes: (b: number) => {
        bytesRead = b;
        draw();
      },
    };
    if (kind === 'csv') await ingestCsv(source, unit!, counter!, options);
    else await ingestNdjson(source, { ...options, overrideUnitId: unit });
    await run.finish();
  } catch (err) {
    await run.abort();
    if (tty) io.stderr.write('\n');
    const kept = run.committedAccepted > 0 ? ` ${run.committedAccepted} rings committed before it stay stored; running the import again is safe (they count as duplicates).` : '';
    if (err instanceof HttpError) return fail(`${file}: ${err.message}${kept}`, 1);
    if (isDatabaseUnavailable(err)) return fail(`the database is unavailable (${(err as Error).message}).${kept}`, 1);
    throw err;
  }
  draw(true);
  if (tty) io.stderr.write('\n');
  const t = run.tally;
  for (const line of summary(file, t, kind)) io.stdout(line);
  ctx.logger.info({ file, unitId: unit, accepted: t.accepted, duplicates: t.duplicates, rejected: t.rejectedCount, ms: Date.now() - started }, 'import finished');
  const code = t.rejectedCount > 0 && t.accepted + t.duplicates === 0 ? 1 : 0;
  if (!values.wait || run.unitIds.length === 0) return code;
  const waited = await waitForAnalysis(ctx.pool, run.unitIds, io, ctx.waitStallMs ?? WAIT_STALL_MS);
  if (waited !== null) return fail(waited, 1);
  return code;
}

/** How often --wait asks how far the analysis has come (each ask counts each unit's backlog), ms. */
const WAIT_POLL_MS = 2_000;
/** How long --wait goes on without any progress of the analysis before it gives up, ms. */
const WAIT_STALL_MS = 120_000;

/**
 * Waits until every unit's analysis has caught up with its stored rings: its backlog is empty.
 * Shows how far it has come (rings analysed of stored, units caught up, ring time reached): one
 * line redrawn on a terminal, a line every 10 s elsewhere. Returns null once caught up, or why
 * it stopped waiting (no progress for stallMs: no worker is taking these units).
 */
async function waitForAnalysis(pool: Pool, unitIds: string[], io: ImportIo, stallMs: number): Promise<string | null> {
  const tty = Boolean(io.stderr.isTTY);
  let lastAnalysed = -1;
  let lastProgressAt = Date.now();
  let lastLine = 0;
  for (;;) {
    const all = await Promise.all(unitIds.map((u) => analysisProgress(pool, u)));
    const stored = all.reduce((n, p) => n + p.ringsStored, 0);
    const analysed = all.reduce((n, p) => n + Math.min(p.ringsAnalysed, p.ringsStored), 0);
    const caughtUp = all.filter((p) => p.ringsStored - p.ringsAnalysed <= 0).length;
    const reached = all.map((p) => p.watermarkTs?.getTime() ?? -Infinity).reduce((a, b) => Math.min(a, b), Infinity);
    const line = `analysis: ${analysed.toLocaleString('en-GB')} of ${stored.toLocaleString('en-GB')} rings, ${caughtUp} of ${unitIds.length} unit${unitIds.length === 1 ? '' : 's'} caught up${Number.isFinite(reached) ? `, every unit analysed up to ${new Date(reached).toISOString()}` : ''}`;
    const done = caughtUp === unitIds.length;
    if (tty) io.stderr.write(`\r${line}\x1b[K${done ? '\n' : ''}`);
    else if (done || Date.now() - lastLine >= 10_000) {
      io.stderr.write(line + '\n');
      lastLine = Date.now();
    }
    if (done) {
      io.stdout(`analysis caught up: ${unitIds.join(', ')}`);
      return null;
    }
    if (analysed > lastAnalysed) {
      lastAnalysed = analysed;
      lastProgressAt = Date.now();
    } else if (Date.now() - lastProgressAt > stallMs) {
      if (tty) io.stderr.write('\n');
      return `the analysis made no progress for ${Math.round(stallMs / 1000)} s (${stored - analysed} rings left); is a worker running on this database (cansight start, or cansight worker)? The rings are stored; their analysis goes on when a worker runs.`;
    }
    await new Promise((r) => setTimeout(r, WAIT_POLL_MS));
  }
}
