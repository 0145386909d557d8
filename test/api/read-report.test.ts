/** `cansight report`: writes the same pre-outage review as the route, to a file. */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { reportCommand } from '../../services/cli/report.ts';
import { UsageError } from '../../services/cli/usage.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { seedUnit } from './read-fixtures.ts';

let t: TestApp;
let dir: string;
beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('rep-a', { name: 'Report unit' }) });
  await seedUnit(t.db.pool, 'rep-a', Date.now());
  dir = mkdtempSync(path.join(os.tmpdir(), 'cansight-report-'));
});
afterAll(async () => {
  rmSync(dir, { recursive: true, force: true });
  await t.close();
});

describe('cansight report', () => {
  it('writes the printable review and names the leading chamber', async () => {
    const lines: string[] = [];
    const file = path.join(dir, 'review.html');
    expect(await reportCommand(['--unit', 'rep-a', '--out', file], { pool: t.db.pool, settings: t.config.worker, out: (l) => lines.push(l) })).toBe(0);
    const html = readFileSync(file, 'utf8');
    expect(html).toContain('Pre-outage review: Report unit (rep-a)');
    expect(html).toMatch(/<td class="n">1<\/td><td>chamber 4<\/td>/);
    expect(lines.join('\n')).toContain('leading chamber: 4');
    expect(lines.join('\n')).toContain('thermocouples to replace: 7');
  });

  it('writes CSV with --csv and honours --from/--to', async () => {
    const file = path.join(dir, 'review.csv');
    const to = new Date().toISOString();
    const from = new Date(Date.now() - 10 * 86_400_000).toISOString();
    expect(await reportCommand(['--unit', 'rep-a', '--out', file, '--csv', '--from', from, '--to', to], { pool: t.db.pool, settings: t.config.worker, out: () => {} })).toBe(0);
    const csv = readFileSync(file, 'utf8');
    expect(csv.split('\r\n')[1]).toMatch(/^chamber,chamber,4,1,/);
    expect(csv).toContain(`window,${from} to ${to}`);
  });

  it('refuses missing options, a bad time and a too-long window, and answers 1 for an unknown unit', async () => {
    const ctx = { pool: t.db.pool, settings: t.config.worker, out: () => {} };
    await expect(reportCommand(['--out', 'x.html'], ctx)).rejects.toThrow(UsageError);
    await expect(reportCommand(['--unit', 'rep-a'], ctx)).rejects.toThrow(/--out/);
    await expect(reportCommand(['--unit', 'rep-a', '--out', 'x.html', '--from', 'last week'], ctx)).rejects.toThrow(/RFC 3339/);
    await expect(reportCommand(['--unit', 'rep-a', '--out', 'x.html', '--from', '2020-01-01T00:00:00Z', '--to', '2026-01-01T00:00:00Z'], ctx)).rejects.toThrow(/400 days/);
    expect(await reportCommand(['--unit', 'nope', '--out', path.join(dir, 'n.html')], ctx)).toBe(1);
  });
});
