/**
 * The dashboard shell and its compiled code, security headers, the page's content policy, the
 * key check, rate limiting per key with the error envelope, and CORS off by default.
 */
import { createHash } from 'node:crypto';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ADVISORY_CAUTION } from '../../services/core/findings.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';

let t: TestApp;
beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('dash-a') });
});
afterAll(async () => t.close());

describe('the dashboard page', () => {
  it('serves a public HTML shell with the cautions, a strict content policy and helmet\'s headers', async () => {
    const res = await t.app.inject({ url: '/' });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^text\/html/);
    expect(res.body).toContain(ADVISORY_CAUTION.replace(/&/g, '&amp;'));
    expect(res.body).toContain('<script defer src="/dashboard/app.js"></script>');
    const csp = String(res.headers['content-security-policy']);
    expect(csp).toContain("script-src 'self'");
    expect(csp).toContain("default-src 'none'");
    expect(csp).not.toContain('unsafe-inline');
    expect(csp).not.toContain('unsafe-eval');
    expect(res.headers['x-content-type-options']).toBe('nosniff');
    expect(res.headers['x-frame-options']).toBeDefined();
    expect(res.headers['strict-transport-security']).toBeDefined();
  });

  it('allows the printable review\'s style sheet by its exact hash', async () => {
    const csp = String((await t.app.inject({ url: '/' })).headers['content-security-policy']);
    const review = await t.app.inject({ url: '/v1/units/dash-a/review', headers: bearer(t.keys.viewer) });
    const style = /<style>([\s\S]*?)<\/style>/.exec(review.body)![1];
    expect(csp).toContain(`'sha256-${createHash('sha256').update(style).digest('base64')}'`);
  });

  it('compiles the browser code once and answers 304 to a matching etag', async () => {
    const js = await t.app.inject({ url: '/dashboard/app.js' });
    expect(js.statusCode).toBe(200);
    expect(js.headers['content-type']).toMatch(/^text\/javascript/);
    expect(js.body.length).toBeGreaterThan(5000);
    expect(js.body).toContain('/v1/fleet');
    expect(js.body).not.toMatch(/\bimport\s*[{*]/); // bundled: no module imports left
    const again = await t.app.inject({ url: '/dashboard/app.js', headers: { 'if-none-match': String(js.headers.etag) } });
    expect(again.statusCode).toBe(304);
    const css = await t.app.inject({ url: '/dashboard/app.css' });
    expect(css.statusCode).toBe(200);
    expect(css.headers['content-type']).toMatch(/^text\/css/);
  });
});

describe('GET /v1/whoami', () => {
  it('tells the page what the key may do', async () => {
    const op = await t.app.inject({ url: '/v1/whoami', headers: bearer(t.keys.operator) });
    expect(op.json()).toMatchObject({ role: 'operator', canAct: true, units: null });
    const scoped = await t.key('viewer', ['dash-a']);
    expect((await t.app.inject({ url: '/v1/whoami', headers: bearer(scoped) })).json()).toMatchObject({ role: 'viewer', canAct: false, units: ['dash-a'] });
    expect((await t.app.inject({ url: '/v1/whoami', headers: bearer(t.keys.ingest) })).statusCode).toBe(403);
  });
});

describe('CORS', () => {
  it('is off by default: no cross-origin header on replies or preflights', async () => {
    const res = await t.app.inject({ url: '/v1/fleet', headers: { ...bearer(t.keys.viewer), origin: 'https://elsewhere.example' } });
    expect(res.statusCode).toBe(200);
    expect(res.headers['access-control-allow-origin']).toBeUndefined();
    const pre = await t.app.inject({ method: 'OPTIONS', url: '/v1/fleet', headers: { origin: 'https://elsewhere.example', 'access-control-request-method': 'GET' } });
    expect(pre.headers['access-control-allow-origin']).toBeUndefined();
    expect(pre.statusCode).toBeGreaterThanOrEqual(400);
  });
});
