/**
 * What the service writes for people to open: every HTML and SVG reply carries a content
 * policy that runs no script and loads nothing from elsewhere, and no CSV cell can be read by a
 * spreadsheet as a formula (OWASP, "CSV Injection": cells starting with =, +, -, @, tab or
 * carriage return).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { seedUnit } from '../api/read-fixtures.ts';
import { csvCell } from '../../services/api/review/csv.ts';

let t: TestApp;
beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('doc-a') });
  await seedUnit(t.db.pool, 'doc-a', Date.now());
});
afterAll(async () => t.close());

describe('content policy', () => {
  it('is on every HTML and SVG reply of the OpenAPI document, and allows no script', async () => {
    const doc = (await t.app.inject({ url: '/openapi.json' })).json() as { paths: Record<string, Record<string, { responses?: Record<string, { content?: Record<string, unknown> }> }>> };
    const documents = Object.entries(doc.paths).filter(([, ops]) => Object.keys(ops.get?.responses?.['200']?.content ?? {}).some((type) => /html|svg/.test(type)));
    expect(documents.length).toBeGreaterThanOrEqual(4);
    for (const [p] of documents) {
      const url = p.replace('{unitId}', 'doc-a').replace('{chamber}', '4').replace(/\{[^}]+\}/g, 'x');
      const res = await t.app.inject({ url, headers: { ...bearer(t.keys.viewer), accept: 'text/html, image/svg+xml' } });
      if (res.statusCode !== 200) continue;
      const csp = String(res.headers['content-security-policy'] ?? '');
      expect(csp, `${url} (${res.headers['content-type']})`).toMatch(/default-src 'none'/);
      expect(csp, url).not.toMatch(/script-src[^;]*'unsafe-inline'/);
    }
    for (const url of ['/v1/units/doc-a/ring.svg', '/v1/units/doc-a/spread.svg', '/v1/fleet.svg', '/v1/units/doc-a/review']) {
      const res = await t.app.inject({ url, headers: bearer(t.keys.viewer) });
      expect(res.statusCode, url).toBe(200);
      expect(res.headers['content-security-policy'], url).toMatch(/default-src 'none'/);
    }
  });

  it("keeps the dashboard page's own policy", async () => {
    const res = await t.app.inject({ url: '/' });
    expect(res.headers['content-security-policy']).toMatch(/script-src 'self'/);
  });
});

describe('CSV cells', () => {
  it.each([
    ['=HYPERLINK("http://example.invalid")', `"'=HYPERLINK(""http://example.invalid"")"`],
    ['+1+2', "'+1+2"],
    ['-2+3', "'-2+3"],
    ['@SUM(A1)', "'@SUM(A1)"],
    ['\tcmd', "'\tcmd"],
    ['\rcmd', `"'\rcmd"`],
    ['plain words', 'plain words'],
  ])('writes the text %j as %j', (text, written) => {
    expect(csvCell(text)).toBe(written);
  });

  it('writes numbers as numbers, negative ones too', () => {
    expect(csvCell(-2.5)).toBe('-2.5');
    expect(csvCell(12)).toBe('12');
  });

  it('the review CSV has no cell a spreadsheet would run', async () => {
    const res = await t.app.inject({ url: '/v1/units/doc-a/review?format=csv', headers: bearer(t.keys.viewer) });
    expect(res.statusCode).toBe(200);
    for (const line of res.body.split('\n')) for (const cell of line.split(',')) expect(cell).not.toMatch(/^"?[=+@\t\r]/);
  });
});
