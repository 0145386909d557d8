/**
 * `cansight demo`: writes NDJSON or CSV by the file's extension, the ground truth and the unit
 * file beside it, ends the rings at --end or at the current time, and refuses bad options with
 * a message that says what to do.
 */
import { mkdtempSync, readFileSync, rmSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { demoCommand } from '../../services/cli/demo.ts';

const dir = mkdtempSync(join(tmpdir(), 'cansight-demo-'));
const END = '2026-03-01T00:00:00Z';
const MINUTE_MS = 60_000;
const lastTs = (file: string) => readFileSync(file, 'utf8').trim().split('\n').at(-1)!.split(',')[0];
afterAll(() => rmSync(dir, { recursive: true, force: true }));

let stderr = '';
let stdout = '';
beforeEach(() => {
  stderr = ''; stdout = '';
  vi.spyOn(process.stderr, 'write').mockImplementation((chunk: string | Uint8Array) => { stderr += String(chunk); return true; });
  vi.spyOn(process.stdout, 'write').mockImplementation((chunk: string | Uint8Array) => { stdout += String(chunk); return true; });
});
afterEach(() => vi.restoreAllMocks());

describe('cansight demo', () => {
  it('writes NDJSON, one ring per line with unitId, all units in time order, and the ground truth beside it', async () => {
    const out = join(dir, 'fleet.ndjson');
    expect(await demoCommand(['--scenario', 'fleet', '--out', out, '--days', '1', '--seed', '5'])).toBe(0);
    const lines = readFileSync(out, 'utf8').trim().split('\n');
    const rings = lines.map((l) => JSON.parse(l));
    expect(new Set(rings.map((r) => r.unitId)).size).toBe(6);
    for (let i = 1; i < rings.length; i++) expect(Date.parse(rings[i].ts)).toBeGreaterThanOrEqual(Date.parse(rings[i - 1].ts));
    expect(Object.keys(rings[0])).toEqual(expect.arrayContaining(['unitId', 'ts', 'loadMw', 'ambientC', 'ambientKPa', 'speedPct', 'exhaustC', 'fuelFlowKgS']));
    const truth = JSON.parse(readFileSync(`${out}.truth.json`, 'utf8'));
    expect(truth.scenario).toBe('fleet');
    expect(truth.seed).toBe(5);
    expect(truth.rings).toBe(lines.length);
    expect(truth.units.map((u: { unitId: string }) => u.unitId)).toEqual(['hp-1', 'hp-2', 'kf-1', 'kf-2', 'mr-1', 'mr-2']);
    expect(stdout).toMatch(/wrote \d+ rings of 6 units/);
  });

  it('writes CSV for one unit with the API header, thermocouples tc1..tcM, and the same rings as NDJSON', async () => {
    const csv = join(dir, 'tc.csv');
    const nd = join(dir, 'tc.ndjson');
    expect(await demoCommand(['--scenario', 'tc-faults', '--out', csv, '--days', '2', '--end', END])).toBe(0);
    expect(await demoCommand(['--scenario', 'tc-faults', '--out', nd, '--days', '2', '--end', END])).toBe(0);
    const lines = readFileSync(csv, 'utf8').trim().split('\n');
    const header = lines[0].split(',');
    expect(header.slice(0, 5)).toEqual(['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct']);
    expect(header.slice(5, 25)).toEqual(Array.from({ length: 20 }, (_, i) => `tc${i + 1}`));
    expect(header.slice(25)).toEqual(['fuel_flow_kg_s', 'flame_detected']);
    const rings = readFileSync(nd, 'utf8').trim().split('\n').map((l) => JSON.parse(l));
    expect(lines.length - 1).toBe(rings.length);
    const row = lines[100].split(',');
    expect(row[0]).toBe(rings[99].ts);
    expect(Number(row[5])).toBe(rings[99].exhaustC[0]);
    const truth = JSON.parse(readFileSync(`${csv}.truth.json`, 'utf8'));
    expect(truth.units[0].faults.map((f: { kind: string }) => f.kind)).toEqual(['tc_open', 'tc_drift', 'tc_erratic', 'tc_frozen']);
  });

  it('the same --seed and --end write the same rings, ground truth and unit file', async () => {
    const a = join(dir, 'a.csv'), b = join(dir, 'b.csv');
    expect(await demoCommand(['--scenario', 'starts', '--out', a, '--days', '2', '--seed', '9', '--end', '2026-02-10T06:00:00Z'])).toBe(0);
    expect(await demoCommand(['--scenario', 'starts', '--out', b, '--days', '2', '--seed', '9', '--end', '2026-02-10T06:00:00Z'])).toBe(0);
    for (const suffix of ['', '.truth.json', '.unit.json']) expect(readFileSync(a + suffix, 'utf8'), suffix || 'rings').toBe(readFileSync(b + suffix, 'utf8'));
    const other = join(dir, 'other.csv');
    expect(await demoCommand(['--scenario', 'starts', '--out', other, '--days', '2', '--seed', '10', '--end', '2026-02-10T06:00:00Z'])).toBe(0);
    expect(readFileSync(other, 'utf8')).not.toBe(readFileSync(a, 'utf8'));
  });

  it('--end is the last ring of every unit, and the window is the --days before it, both ends included', async () => {
    const out = join(dir, 'end.ndjson');
    expect(await demoCommand(['--scenario', 'fleet', '--out', out, '--days', '1', '--end', '2026-02-20T12:00:00+01:00'])).toBe(0);
    const rings = readFileSync(out, 'utf8').trim().split('\n').map((l) => JSON.parse(l) as { unitId: string; ts: string });
    const last = new Map<string, string>(), first = new Map<string, string>();
    for (const r of rings) {
      last.set(r.unitId, r.ts);
      if (!first.has(r.unitId)) first.set(r.unitId, r.ts);
    }
    expect([...last.values()]).toEqual(Array(6).fill('2026-02-20T11:00:00Z'));
    expect([...first.values()]).toEqual(Array(6).fill('2026-02-19T11:00:00Z'));
    const truth = JSON.parse(readFileSync(`${out}.truth.json`, 'utf8'));
    expect(truth).toMatchObject({ from: '2026-02-19T11:00:00Z', to: '2026-02-20T11:00:00Z', lastRing: '2026-02-20T11:00:00Z' });
    expect(stdout).toContain('last ring at 2026-02-20T11:00:00Z');
    // An --end between two steady rings: the last ring is the one before it.
    const csv = join(dir, 'between.csv');
    expect(await demoCommand(['--scenario', 'healthy', '--out', csv, '--days', '1', '--end', '2026-02-20T12:00:30Z'])).toBe(0);
    expect(lastTs(csv)).toBe('2026-02-20T12:00:00Z');
  });

  it('without --end the last ring is now, rounded down to the steady interval', async () => {
    const out = join(dir, 'now.csv');
    const before = Date.now();
    expect(await demoCommand(['--scenario', 'healthy', '--out', out, '--days', '1'])).toBe(0);
    const after = Date.now();
    const last = Date.parse(lastTs(out));
    expect(last % MINUTE_MS).toBe(0);
    expect(last).toBeLessThanOrEqual(after);
    expect(last).toBeGreaterThan(before - MINUTE_MS);
    // The time it ends at is the one passed in, rounded down to the ring grid.
    const at = Date.parse('2026-02-11T10:07:42.500Z');
    expect(await demoCommand(['--scenario', 'healthy', '--out', out, '--days', '1'], at)).toBe(0);
    expect(lastTs(out)).toBe('2026-02-11T10:07:00Z');
    expect(await demoCommand(['--scenario', 'healthy', '--out', out, '--days', '1', '--steady-interval', '45'], at)).toBe(0);
    expect(Date.parse(lastTs(out)) % 45_000).toBe(0);
    expect(at - Date.parse(lastTs(out))).toBeLessThan(45_000);
  });

  it('writes the unit file in the body shape of POST /v1/units: one object for one unit, an array for several', async () => {
    const one = join(dir, 'one.csv');
    expect(await demoCommand(['--scenario', 'plugging', '--out', one, '--days', '1', '--end', END])).toBe(0);
    expect(JSON.parse(readFileSync(`${one}.unit.json`, 'utf8'))).toEqual({
      id: 'sim-plugging', name: 'Plugging unit', site: 'Harbour Point', ratedPowerMw: 58.5,
      thermocouples: { count: 20, firstAngleDeg: 9 }, chambers: { count: 11, firstAngleDeg: 0 },
      swirl: { sense: 1, curve: [[0.2, 88], [0.6, 70], [1.0, 52]], startupDeg: 100 }, temperatureUnit: 'C', view: 'upstream',
    });
    expect(stdout).toContain(`cansight import --register ${one}.unit.json ${one}`);
    const many = join(dir, 'many.ndjson');
    expect(await demoCommand(['--scenario', 'fleet', '--out', many, '--days', '1', '--end', END])).toBe(0);
    const units = JSON.parse(readFileSync(`${many}.unit.json`, 'utf8'));
    expect(units.map((u: { id: string }) => u.id)).toEqual(['hp-1', 'hp-2', 'kf-1', 'kf-2', 'mr-1', 'mr-2']);
  });

  it('--unit picks one unit of a many-unit scenario', async () => {
    const out = join(dir, 'kf2.csv');
    expect(await demoCommand(['--scenario', 'fleet', '--unit', 'kf-2', '--out', out, '--days', '1'])).toBe(0);
    expect(readFileSync(out, 'utf8').split('\n')[0].split(',').filter((h) => h.startsWith('tc')).length).toBe(21);
  });

  const bad: [string[], RegExp][] = [
    [['--scenario', 'nope', '--out', 'x.csv'], /unknown scenario "nope"; choose one of: fleet, healthy/],
    [['--out', 'x.csv'], /--scenario is required/],
    [['--scenario', 'healthy'], /--out FILE is required/],
    [['--scenario', 'healthy', '--out', 'x.txt'], /must end in \.ndjson, \.jsonl or \.csv/],
    [['--scenario', 'fleet', '--out', 'x.csv'], /a CSV file holds one unit.*pass --unit/],
    [['--scenario', 'fleet', '--unit', 'zz-9', '--out', 'x.ndjson'], /--unit "zz-9" is not in scenario "fleet"; its units are: hp-1/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--days', 'ten'], /--days must be a positive number, got "ten"/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--seed', '1.5'], /--seed must be a whole number/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--end', 'soon'], /--end "soon" is not an RFC 3339 time with offset \(e\.g\. 2026-03-01T10:00:00Z\); give the last ring's time .* or leave --end out to end at the current time/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--end', '2026-03-01'], /--end "2026-03-01" is not an RFC 3339 time with offset/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--end', '2026-03-01T00:00:00'], /--end "2026-03-01T00:00:00" is not an RFC 3339 time with offset/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--end', '2026-02-30T00:00:00Z'], /--end "2026-02-30T00:00:00Z" has day 30, but that month has 28 days/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--end', '1970-01-05T00:00:00Z'], /--end "1970-01-05T00:00:00Z" is too early: the 14 days before it start before 1970-01-01T00:00:00Z.*fewer --days/],
    [['--scenario', 'healthy', '--out', 'x.csv', '--colour', 'red'], /Unknown option '--colour'/],
  ];
  for (const [args, message] of bad) {
    it(`refuses ${args.join(' ')} with exit code 2 and a clear message`, async () => {
      expect(await demoCommand(args)).toBe(2);
      expect(stderr).toMatch(message);
      expect(existsSync('x.csv')).toBe(false);
    });
  }

  it('reports a file it cannot write with exit code 1', async () => {
    expect(await demoCommand(['--scenario', 'healthy', '--days', '1', '--out', join(dir, 'no', 'such', 'dir.csv')])).toBe(1);
    expect(stderr).toMatch(/could not write/);
  });
});
