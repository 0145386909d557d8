/**
 * The pre-outage review: chambers ranked by evidence, thermocouples to replace, the swirl fit and
 * the cautions, as printable HTML and as CSV; its window limits.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ADVISORY_CAUTION } from '../../services/core/findings.ts';
import { REVIEW_CSV_COLUMNS } from '../../services/api/review/csv.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { DAY_MS, seedUnit } from './read-fixtures.ts';

let t: TestApp;
const get = (url: string, headers: Record<string, string> = {}) => t.app.inject({ url, headers: { ...bearer(t.keys.viewer), ...headers } });

beforeAll(async () => {
  t = await createTestApp();
  for (const id of ['rev-a', 'rev-empty']) await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id, { name: `Unit ${id}` }) });
  await seedUnit(t.db.pool, 'rev-a', Date.now());
});
afterAll(async () => t.close());

const escaped = (s: string) => s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;').replace(/'/g, '&#39;');

describe('GET /v1/units/:unitId/review', () => {
  it('ranks the cold, drifting, alarmed chamber first, lists the thermocouple to replace, and carries the cautions', async () => {
    const res = await get('/v1/units/rev-a/review');
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^text\/html/);
    const html = res.body;
    expect(html).toContain('Pre-outage review: Unit rev-a (rev-a)');
    expect(html).toMatch(/<td class="n">1<\/td><td>chamber 4<\/td>/);
    expect(html).toContain('Borescope chamber 4');
    expect(html).toContain('check thermocouple 7 and its wiring');
    expect(html.split(escaped(ADVISORY_CAUTION)).length - 1).toBe(2);
    expect(html).toContain('baseline version 1');
    expect(html).toContain('Swirl curve and chamber map');
    expect(html).toMatch(/chamber 4: -?\d/); // the leading chamber's trend picture is inlined
    expect(html).toContain('<svg');
    // Other chambers: no action.
    expect(html).toMatch(/<td class="n">10<\/td><td>chamber \d+<\/td>.*No action indicated/);
  });

  it('gives the same ranking as CSV with ?format=csv or Accept: text/csv', async () => {
    for (const res of [await get('/v1/units/rev-a/review?format=csv'), await get('/v1/units/rev-a/review', { accept: 'text/csv' })]) {
      expect(res.statusCode).toBe(200);
      expect(res.headers['content-type']).toMatch(/^text\/csv/);
      expect(res.headers['content-disposition']).toMatch(/attachment; filename="cansight-review-rev-a-\d{4}-\d\d-\d\d\.csv"/);
      const lines = res.body.trim().split('\r\n');
      expect(lines[0]).toBe(REVIEW_CSV_COLUMNS.join(','));
      const first = lines[1].split(',');
      expect(first.slice(0, 4)).toEqual(['chamber', 'chamber', '4', '1']);
      expect(Number(first[5])).toBe(-11);
      expect(lines.filter((l) => l.startsWith('chamber,'))).toHaveLength(10);
      expect(lines.filter((l) => l.startsWith('thermocouple,replace,'))).toEqual([expect.stringMatching(/^thermocouple,replace,7,/)]);
      expect(lines.at(-1)).toContain('caution');
    }
  });

  it('reviews a unit without analysis without failing, and refuses a window over 400 days', async () => {
    const empty = await get('/v1/units/rev-empty/review');
    expect(empty.statusCode).toBe(200);
    expect(empty.body).toContain('no baseline fitted yet');
    expect(empty.body).toContain('No thermocouple needs replacing');
    const long = await get(`/v1/units/rev-a/review?from=${new Date(Date.now() - 500 * DAY_MS).toISOString()}&to=${new Date().toISOString()}`);
    expect(long.statusCode).toBe(400);
    expect(long.json().message).toMatch(/400 days/);
    expect((await get('/v1/units/rev-a/review?format=pdf')).statusCode).toBe(400);
    expect((await get('/v1/units/nope/review')).statusCode).toBe(404);
  });
});
