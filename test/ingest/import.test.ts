/**
 * `cansight import`: CSV and NDJSON files through the same validation and write path, the
 * summary line, --unit filling and overriding, re-runs counting duplicates, and clear errors.
 * `--register UNITFILE`: units registered from the file before the rings, a unit already
 * registered alike left as it is, one registered differently or an invalid file refused.
 */
import { writeFile } from 'node:fs/promises';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { loadConfig } from '../../services/db/config.ts';
import { countRings } from '../../services/db/rings.ts';
import { createUnitsRepository } from '../../services/db/units.ts';
import type { TestDatabase } from '../helpers/db.ts';
import { bearer, createTestApp, unitBody } from '../helpers/app.ts';
import { BASE_MS, csv, importSetup, ndjson, ring } from './fixtures.ts';

const config = loadConfig({ LOG_LEVEL: 'silent', CANSIGHT_INGEST_CHUNK_RINGS: '50' });
let setup: Awaited<ReturnType<typeof importSetup>>;
let db: TestDatabase;
let dir: string;

beforeAll(async () => {
  setup = await importSetup('cansight-import-', ['imp-1', 'imp-2', 'imp-3'], config);
  ({ db, dir } = setup);
});
afterAll(async () => setup?.close());

const run = (args: string[], tty = false) => setup.run(args, { tty });

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

describe('cansight import --register', () => {
  const units = () => createUnitsRepository(db.pool);
  const lastRing = async (unitId: string) =>
    (await db.pool.query(`SELECT max(ts) AS ts FROM rings WHERE unit_id = $1`, [unitId])).rows[0].ts as Date | null;
  async function unitFile(name: string, content: unknown): Promise<string> {
    const file = path.join(dir, name);
    await writeFile(file, typeof content === 'string' ? content : JSON.stringify(content, null, 2));
    return file;
  }

  it('registers the units of the file, then loads their rings; a second run finds them alike and goes on', async () => {
    const { temperatureUnit: _, ...noUnit } = unitBody('reg-1');
    const file = await unitFile('fleet.unit.json', [noUnit, unitBody('reg-2', { thermocouples: { count: 18, firstAngleDeg: 5 }, view: 'upstream' })]);
    const rings = path.join(dir, 'fleet.ndjson');
    await writeFile(rings, ndjson(Array.from({ length: 60 }, (_, i) => ({ unitId: i % 2 ? 'reg-2' : 'reg-1', ...ring(3000 + i) }))));
    const first = await run(['--register', file, rings]);
    expect(first).toMatchObject({ code: 0, err: '' });
    expect(first.out).toEqual([
      'registered unit reg-1 (Test unit reg-1, Test Site) from fleet.unit.json',
      'registered unit reg-2 (Test unit reg-2, Test Site) from fleet.unit.json',
      'fleet.ndjson: accepted 60, duplicates 0, rejected 0',
    ]);
    const one = await units().get('reg-1');
    const { id: _id, name: _n, site: _s, ...config } = noUnit;
    expect(one).toMatchObject({ name: 'Test unit reg-1', site: 'Test Site', version: 1 });
    expect(one!.config).toEqual({ ...config, temperatureUnit: 'C' });
    expect((await units().get('reg-2'))!.config).toMatchObject({ thermocouples: { count: 18, firstAngleDeg: 5 }, view: 'upstream' });
    expect(await countRings(db.pool, 'reg-1')).toBe(30);
    expect((await lastRing('reg-2'))!.toISOString()).toBe(new Date(BASE_MS + 3059_000).toISOString());

    const again = await run(['--register', file, rings]);
    expect(again.code).toBe(0);
    expect(again.out).toEqual([
      'unit reg-1 is already registered with the configuration in fleet.unit.json',
      'unit reg-2 is already registered with the configuration in fleet.unit.json',
      'fleet.ndjson: accepted 0, duplicates 60, rejected 0',
    ]);
    expect((await units().get('reg-1'))!.versions).toHaveLength(1);
  });

  it('a CSV file of the one unit of the file needs no --unit', async () => {
    const file = await unitFile('solo.unit.json', unitBody('reg-csv'));
    const rings = path.join(dir, 'solo.csv');
    await writeFile(rings, csv(Array.from({ length: 25 }, (_, i) => ring(4000 + i))));
    const r = await run([rings, '--register', file]);
    expect(r.out).toEqual(['registered unit reg-csv (Test unit reg-csv, Test Site) from solo.unit.json', 'solo.csv: accepted 25, duplicates 0, rejected 0']);
    expect(await countRings(db.pool, 'reg-csv')).toBe(25);
    expect((await lastRing('reg-csv'))!.toISOString()).toBe(new Date(BASE_MS + 4024_000).toISOString());
  });

  it('refuses a unit registered with another configuration, naming the differences, and changes or imports nothing', async () => {
    const file = await unitFile('changed.unit.json', [
      unitBody('reg-new'),
      unitBody('imp-1', { name: 'Renamed unit', ratedPowerMw: 30, swirl: { sense: 1, curve: [[0.3, 92], [0.6, 75], [1.0, 55]] } }),
    ]);
    const rings = path.join(dir, 'changed.ndjson');
    await writeFile(rings, ndjson([{ unitId: 'imp-1', ...ring(9000) }]));
    const before = await countRings(db.pool, 'imp-1');
    const r = await run(['--register', file, rings]);
    expect(r.code).toBe(1);
    expect(r.out).toEqual([]);
    expect(r.err).toContain(`cansight import: unit imp-1 is already registered and differs from ${file}: `);
    expect(r.err).toContain('name registered "Test unit imp-1", in the file "Renamed unit"');
    expect(r.err).toContain('ratedPowerMw registered 24, in the file 30');
    expect(r.err).toContain('swirl.curve.1.1 registered 74, in the file 75');
    expect(r.err).toContain('Nothing was changed or imported. To change the registered unit use PATCH /v1/units/imp-1');
    expect(await countRings(db.pool, 'imp-1')).toBe(before);
    const kept = await units().get('imp-1');
    expect(kept).toMatchObject({ name: 'Test unit imp-1', version: 1, config: { ratedPowerMw: 24 } });
    expect(await units().exists('reg-new')).toBe(false);
  });

  it('refuses an invalid unit file naming the field, with the reasons POST /v1/units gives, and registers nothing', async () => {
    const t = await createTestApp();
    try {
      const cases: [string, Record<string, unknown>, string][] = [
        ['too few thermocouples', unitBody('bad-1', { thermocouples: { count: 2, firstAngleDeg: 0 } }), 'thermocouples.count'],
        ['no name', (({ name: _, ...b }) => b)(unitBody('bad-2')), 'name'],
        ['an unknown field', unitBody('bad-3', { colour: 'red' }), 'colour'],
        ['a temperature unit that is not C or F', unitBody('bad-4', { temperatureUnit: 'K' }), 'temperatureUnit'],
        ['a bad unit id', unitBody('Bad Unit'), 'id'],
        ['angles that do not match the count', unitBody('bad-5', { thermocouples: { count: 18, anglesDeg: [0, 10, 20] } }), 'thermocouples.anglesDeg'],
        ['a swirl curve not sorted by load', unitBody('bad-6', { swirl: { sense: 1, curve: [[0.6, 70], [0.3, 90]] } }), 'swirl.curve.1'],
      ];
      const rings = path.join(dir, 'history.csv');
      for (const [what, body, field] of cases) {
        const api = await t.send({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: body });
        expect(api.statusCode, what).toBeGreaterThanOrEqual(400);
        const detail = (api.json().details as { field: string; reason: string }[])[0];
        expect(detail.field, what).toBe(field);
        const file = await unitFile(`${field}.unit.json`, body);
        const r = await run(['--register', file, rings]);
        expect(r.code, what).toBe(2);
        expect(r.err, what).toMatch(new RegExp(`^cansight import: --register ${file.replace(/[.*+?^${}()|[\]\\]/g, '\\$&')}: `));
        expect(r.err, what).toContain(`field "${field}"`);
        expect(r.err, what).toContain(detail.reason);
        if (typeof body.id === 'string') expect(await units().exists(body.id), what).toBe(false);
      }
    } finally {
      await t.close();
    }
  });

  it('refuses a unit file that is missing, not JSON, empty or not units, and a --unit that is not in it', async () => {
    const rings = path.join(dir, 'history.csv');
    const many = await unitFile('two.unit.json', [unitBody('two-1'), unitBody('two-2', { chambers: { count: 40, firstAngleDeg: 0 } })]);
    expect(await run(['--register', many, rings])).toMatchObject({ code: 2, err: expect.stringContaining(`${many}, unit 2 of 2 (two-2): field "chambers.count": must be <= 32`) });
    expect(await units().exists('two-1')).toBe(false);
    expect(await run(['--register', path.join(dir, 'nowhere.json'), rings])).toMatchObject({ code: 2, err: expect.stringMatching(/--register cannot read .*nowhere\.json: no such file/) });
    const notJson = await unitFile('notjson.unit.json', '{"id": "x",');
    expect(await run(['--register', notJson, rings])).toMatchObject({ code: 2, err: expect.stringMatching(/notjson\.unit\.json is not JSON \(.*\); it should hold the body of POST \/v1\/units/) });
    expect(await run(['--register', await unitFile('empty.unit.json', []), rings])).toMatchObject({ code: 2, err: expect.stringMatching(/holds an empty list; give at least one unit/) });
    expect(await run(['--register', await unitFile('number.unit.json', 42), rings])).toMatchObject({ code: 2, err: expect.stringMatching(/must be a JSON object with the fields of POST \/v1\/units .*, or an array of such objects/) });
    expect(await run(['--register', await unitFile('twice.unit.json', [unitBody('dup-1'), unitBody('dup-1')]), rings])).toMatchObject({ code: 2, err: expect.stringMatching(/unit 2 of 2 \(dup-1\): unit dup-1 is listed twice/) });
    const one = await unitFile('one.unit.json', unitBody('one-1'));
    expect(await run(['--register', one, rings, '--unit', 'imp-1'])).toMatchObject({ code: 2, err: expect.stringMatching(/--unit imp-1 is not a unit of .*one\.unit\.json \(one-1\); leave --unit out or name one of them/) });
    const csvFile = await unitFile('many-csv.csv', csv([ring(1)]));
    expect(await run(['--register', await unitFile('pair.unit.json', [unitBody('pair-1'), unitBody('pair-2')]), csvFile])).toMatchObject({ code: 2, err: expect.stringMatching(/name it with --unit U \(.*pair\.unit\.json has 2 units\)/) });
    expect(await units().exists('one-1')).toBe(false);
    expect(await units().exists('pair-1')).toBe(false);
  });
});
