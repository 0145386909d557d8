/**
 * `cansight demo`: writes NDJSON or CSV by the file's extension, the ground truth beside it, and
 * refuses bad options with a message that says what to do.
 */
import { mkdtempSync, readFileSync, rmSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { demoCommand } from '../../services/cli/demo.ts';

const dir = mkdtempSync(join(tmpdir(), 'cansight-demo-'));
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
    expect(await demoCommand(['--scenario', 'tc-faults', '--out', csv, '--days', '2'])).toBe(0);
    expect(await demoCommand(['--scenario', 'tc-faults', '--out', nd, '--days', '2'])).toBe(0);
    const lines = readFileSync(csv, 'utf8').trim().split('\n');
    const header = lines[0].split(',');
    expect(header.slice(0, 5)).toEqual(['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct']);
    expect(header.slice(5, 23)).toEqual(Array.from({ length: 18 }, (_, i) => `tc${i + 1}`));
    expect(header.slice(23)).toEqual(['fuel_flow_kg_s', 'flame_detected']);
    const rings = readFileSync(nd, 'utf8').trim().split('\n').map((l) => JSON.parse(l));
    expect(lines.length - 1).toBe(rings.length);
    const row = lines[100].split(',');
    expect(row[0]).toBe(rings[99].ts);
    expect(Number(row[5])).toBe(rings[99].exhaustC[0]);
    const truth = JSON.parse(readFileSync(`${csv}.truth.json`, 'utf8'));
    expect(truth.units[0].faults.map((f: { kind: string }) => f.kind)).toEqual(['tc_open', 'tc_drift', 'tc_erratic', 'tc_frozen']);
  });

  it('the same seed writes the same file', async () => {
    const a = join(dir, 'a.csv'), b = join(dir, 'b.csv');
    await demoCommand(['--scenario', 'starts', '--out', a, '--days', '2', '--seed', '9']);
    await demoCommand(['--scenario', 'starts', '--out', b, '--days', '2', '--seed', '9']);
    expect(readFileSync(a, 'utf8')).toBe(readFileSync(b, 'utf8'));
  });

  it('--unit picks one unit of a many-unit scenario', async () => {
    const out = join(dir, 'kf2.csv');
    expect(await demoCommand(['--scenario', 'fleet', '--unit', 'kf-2', '--out', out, '--days', '1'])).toBe(0);
    expect(readFileSync(out, 'utf8').split('\n')[0].split(',').filter((h) => h.startsWith('tc')).length).toBe(24);
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
    [['--scenario', 'healthy', '--out', 'x.csv', '--end', 'soon'], /--end "soon" is not a time/],
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
