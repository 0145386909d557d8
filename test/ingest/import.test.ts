/**
 * `cansight import`: CSV and NDJSON files through the same validation and write path, the
 * summary line, --unit filling and overriding, re-runs counting duplicates, and clear errors.
 */
import { chmod, mkdtemp, rm, writeFile } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { importCommand, type ImportIo } from '../../services/cli/import.ts';
import { loadConfig } from '../../services/db/config.ts';
import { createLogger } from '../../services/db/logger.ts';
import { countRings } from '../../services/db/rings.ts';
import { createUnitsRepository } from '../../services/db/units.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { unitBody } from '../helpers/app.ts';
import { csv, ndjson, ring } from './fixtures.ts';

let db: TestDatabase;
let dir: string;
const config = loadConfig({ LOG_LEVEL: 'silent', CANSIGHT_INGEST_CHUNK_RINGS: '50' });
const logger = createLogger('silent');

beforeAll(async () => {
  db = await createTestDatabase();
  dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-import-'));
  await chmod(dir, 0o777);
  const units = createUnitsRepository(db.pool);
  for (const id of ['imp-1', 'imp-2', 'imp-3']) {
    const { id: _, name, site, ...c } = unitBody(id);
    await units.create({ id, name, site }, c as never, 'test');
  }
});
afterAll(async () => {
  await db?.drop();
  if (dir) await rm(dir, { recursive: true, force: true });
});

async function run(args: string[], tty = false) {
  const out: string[] = [];
  let err = '';
  const io: ImportIo = { stdout: (l) => out.push(l), stderr: { isTTY: tty, write: (s: string) => (err += s) } };
  const code = await importCommand(args, { pool: db.pool, config, logger }, io);
  return { code, out, err };
}

describe('cansight import', () => {
  it('loads a CSV file for --unit, reports rejected rows, and a re-run counts duplicates', async () => {
    const rows = Array.from({ length: 120 }, (_, i) => ring(i));
    rows[7] = { ...rows[7], ts: '2026-01-15 25:00:00Z' };
    const file = path.join(dir, 'history.csv');
    await writeFile(file, csv(rows));
    const first = await run([file, '--unit', 'imp-1'], true);
    expect(first.code).toBe(0);
    expect(first.out[0]).toBe('history.csv: accepted 119, duplicates 0, rejected 1');
    expect(first.out[1]).toMatch(/^ {2}row 8: ts .*hour 25/);
    expect(first.err).toMatch(/\[#+\] 100%/);
    expect(await countRings(db.pool, 'imp-1')).toBe(119);
    const again = await run([file, '--unit', 'imp-1']);
    expect(again.out[0]).toBe('history.csv: accepted 0, duplicates 119, rejected 1');
    expect(again.err).toBe(''); // not a terminal: no progress bar
  });

  it('loads NDJSON lines by their own unitId; --unit fills a missing one and overrides a present one', async () => {
    const file = path.join(dir, 'gateway.ndjson');
    await writeFile(file, ndjson([{ unitId: 'imp-2', ...ring(1000) }, ring(1001), { unitId: 'imp-3', ...ring(1002) }]));
    const own = await run([file]);
    expect(own.out[0]).toBe('gateway.ndjson: accepted 2, duplicates 0, rejected 1');
    expect(own.out[1]).toBe('  line 2: unitId is required on every line');
    const forced = await run([file, '--unit', 'imp-1']);
    expect(forced.out[0]).toBe('gateway.ndjson: accepted 3, duplicates 0, rejected 0');
    expect(await countRings(db.pool, 'imp-1')).toBe(122);
  });

  it('tells the format from the content when the extension does not', async () => {
    const file = path.join(dir, 'export.txt');
    await writeFile(file, ndjson([{ unitId: 'imp-3', ...ring(500) }]));
    expect((await run([file])).out[0]).toBe('export.txt: accepted 1, duplicates 0, rejected 0');
  });

  it('refuses wrong use with a message naming the problem', async () => {
    const csvFile = path.join(dir, 'history.csv');
    expect(await run([])).toMatchObject({ code: 2, err: expect.stringMatching(/exactly one file/) });
    expect(await run([path.join(dir, 'missing.csv'), '--unit', 'imp-1'])).toMatchObject({ code: 2, err: expect.stringMatching(/no such file/) });
    expect(await run([csvFile])).toMatchObject({ code: 2, err: expect.stringMatching(/--unit U/) });
    expect(await run([csvFile, '--unit', 'Bad Unit'])).toMatchObject({ code: 2, err: expect.stringMatching(/not a unit id/) });
    expect(await run([csvFile, '--unit', 'ghost-1'])).toMatchObject({ code: 1, err: expect.stringMatching(/no unit ghost-1 is registered/) });
    const badHeader = path.join(dir, 'bad.csv');
    await writeFile(badHeader, 'time,load\n1,2\n');
    expect(await run([badHeader, '--unit', 'imp-1'])).toMatchObject({ code: 1, err: expect.stringMatching(/CSV header is not usable/) });
  });
});
