/**
 * `cansight import FILE [--unit U] [--format csv|ndjson]`: loads a history file of rings
 * through the same validation and write path as the HTTP endpoints, streaming the file in
 * chunks. CSV holds one unit (--unit is required); NDJSON lines carry unitId, which --unit
 * fills in where missing and overrides where present. The format comes from the extension
 * (.csv; .ndjson, .jsonl) or, failing that, from the first character of the file.
 *
 * Commits every COMMIT_EVERY rings, so an interrupted import keeps what it committed and a
 * re-run counts those rings as duplicates. A progress bar (bytes read of the file's size) goes
 * to stderr when it is a terminal; the summary line goes to stdout.
 */
import { createReadStream } from 'node:fs';
import { open, stat } from 'node:fs/promises';
import path from 'node:path';
import { parseArgs } from 'node:util';
import { HttpError } from '../api/errors.ts';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import { isDatabaseUnavailable, type Pool } from '../db/pool.ts';
import { IngestRun, type IngestTally } from '../ingest/run.ts';
import { ingestCsv, ingestNdjson } from '../ingest/streams.ts';
import { thermocoupleCounter } from '../ingest/validate.ts';

export const COMMIT_EVERY = 100_000;
const SHOWN_REASONS = 5;

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

export async function importCommand(args: string[], ctx: { pool: Pool; config: Config; logger: Logger }, io: ImportIo = defaultIo()): Promise<number> {
  const fail = (message: string, code: number) => {
    io.stderr.write(`cansight import: ${message}\n`);
    return code;
  };
  let parsed;
  try {
    parsed = parseArgs({ args, allowPositionals: true, strict: true, options: { unit: { type: 'string' }, format: { type: 'string' } } });
  } catch (err) {
    return fail(`${(err as Error).message}\nusage: cansight import FILE [--unit U] [--format csv|ndjson]`, 2);
  }
  const { positionals, values } = parsed;
  if (positionals.length !== 1) return fail('name exactly one file: cansight import FILE [--unit U]', 2);
  const file = positionals[0];
  const unit = values.unit;
  if (unit !== undefined && !/^[a-z0-9-]{1,40}$/.test(unit)) return fail(`--unit "${unit}" is not a unit id (lower-case letters, digits and dashes, 1–40)`, 2);
  if (values.format !== undefined && values.format !== 'csv' && values.format !== 'ndjson') return fail(`--format "${values.format}" is not csv or ndjson`, 2);

  let size: number;
  try {
    const st = await stat(file);
    if (!st.isFile()) return fail(`${file} is not a file`, 2);
    size = st.size;
  } catch (err) {
    return fail(`cannot read ${file}: ${(err as NodeJS.ErrnoException).code === 'ENOENT' ? 'no such file' : (err as Error).message}`, 2);
  }
  const kind = (values.format as 'csv' | 'ndjson' | undefined) ?? (await sniff(file));
  if (kind === 'csv' && unit === undefined) return fail('a CSV file holds the rings of one unit; name it with --unit U', 2);

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
        return fail(`no unit ${unit} is registered; register it first (POST /v1/units)`, 1);
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
  return t.rejectedCount > 0 && t.accepted + t.duplicates === 0 ? 1 : 0;
}
