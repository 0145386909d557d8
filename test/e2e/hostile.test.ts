/**
 * Hostile text stays text. A unit name and site, an alert message and advice, and a shelve
 * reason holding markup (<script>, </svg>, an event handler), quotes and control characters
 * go through the dashboard in Chromium, every picture and the review (HTML and CSV): nothing
 * runs, nothing breaks out of its element, and the text is shown as it was written.
 * (OWASP, cross-site scripting; the dashboard's content policy allows its own script only.)
 * Skipped, with the reason printed, when /usr/bin/chromium is absent.
 */
import { XMLValidator } from 'fast-xml-parser';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { BrowserContext, Page } from 'playwright-core';
import { CHROMIUM, hasChromium, launchChromium } from '../helpers/chromium.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { seedAlert } from '../helpers/alerts.ts';

if (!hasChromium) console.log(`hostile-markup browser tests skipped: ${CHROMIUM} is not installed (apt-get install -y chromium)`);

/** Markup that would run or break out if it were not escaped, with quotes and a control character. */
const HOSTILE = `</svg></script><script>window.__ran=1</script><img src=x onerror="window.__ran=2">'"&\u0007`;
const PRINTED = `</svg></script><script>window.__ran=1</script><img src=x onerror="window.__ran=2">'"&`;

let t: TestApp;
let base: string;
let browser: BrowserContext;
let chrome: Awaited<ReturnType<typeof launchChromium>> | undefined;
let alertId: string;
let shelvedId: string;

describe.skipIf(!hasChromium)('hostile text', () => {
  beforeAll(async () => {
    t = await createTestApp();
    const res = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('hostile-1', { name: `Unit ${HOSTILE}`, site: `Site ${HOSTILE}` }) });
    expect(res.statusCode, res.body).toBe(201);
    const a = await seedAlert(t.db.pool, { unitId: 'hostile-1', kind: 'chamber_cold', grade: 'alarm' });
    alertId = a.id;
    await t.db.pool.query(`UPDATE alerts SET message = $2, advice = $2 WHERE id = $1`, [a.id, `Message ${HOSTILE}`]);
    // A second alert, shelved with the text as its reason and name.
    const b = await seedAlert(t.db.pool, { unitId: 'hostile-1', kind: 'chamber_hot', chamber: 5, grade: 'warning' });
    shelvedId = b.id;
    const shelved = await t.app.inject({ method: 'POST', url: `/v1/alerts/${b.id}/shelve`, headers: bearer(t.keys.operator), payload: { by: `shift operator ${HOSTILE}`, until: new Date(Date.now() + 3_600_000).toISOString(), reason: `Reason ${HOSTILE}` } });
    expect(shelved.statusCode, shelved.body).toBe(200);
    base = await t.app.listen({ host: '127.0.0.1', port: 0 });
    chrome = await launchChromium();
    browser = chrome.browser;
  }, 120_000);

  afterAll(async () => {
    await chrome?.close();
    await t?.close();
  });

  async function open(): Promise<{ page: Page; problems: string[] }> {
    const page = await browser.newPage();
    const problems: string[] = [];
    page.on('dialog', (d) => void d.dismiss().then(() => problems.push(`dialog: ${d.message()}`)));
    page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
    await page.goto(base + '/');
    await page.fill('#key-input', t.keys.operator);
    await page.click('#key-form button[type=submit]');
    await page.waitForSelector('#fleet-board tbody tr[data-unit]');
    return { page, problems };
  }

  const ran = (page: Page) => page.evaluate(() => (window as unknown as { __ran?: number }).__ran ?? null);

  it('the fleet board, the unit page and the chamber page show it as text and run nothing', async () => {
    const { page, problems } = await open();
    expect(await page.textContent('#fleet-board')).toContain(`Unit ${PRINTED}`);
    await page.goto(`${base}/#/unit/hostile-1`);
    await page.waitForSelector(`#unit-alerts li[data-alert="${alertId}"]`);
    expect(await page.textContent('.pagehead h1')).toBe(`Unit ${HOSTILE}`);
    expect(await page.textContent('.pagehead .sub')).toContain(`Site ${PRINTED}`);
    expect(await page.textContent('#unit-alerts')).toContain(`Message ${PRINTED}`);
    await page.goto(`${base}/#/unit/hostile-1/chamber/4`);
    await page.waitForSelector('#chamber-evidence, .error');
    // No element came from the text: no script or img was added to the page.
    expect(await page.$$eval('img, script:not([src])', (els) => els.length)).toBe(0);
    expect(await ran(page)).toBeNull();
    expect(problems).toEqual([]);
    await page.close();
  });

  it('every picture is well-formed XML with the text escaped, and runs nothing opened on its own', async () => {
    for (const url of ['/v1/fleet.svg', '/v1/units/hostile-1/ring.svg', '/v1/units/hostile-1/spread.svg', '/v1/units/hostile-1/chambers/4/trend.svg']) {
      const res = await t.app.inject({ url, headers: bearer(t.keys.viewer) });
      if (res.statusCode !== 200) continue;
      expect(XMLValidator.validate(res.body), url).toBe(true);
      expect(res.body, url).not.toMatch(/<script/i);
      // A control character is not allowed in XML 1.0; it is shown as U+FFFD.
      expect(res.body, url).not.toMatch(/\u0007/);
      const page = await browser.newPage();
      await page.setContent(res.body);
      expect(await ran(page), url).toBeNull();
      await page.close();
    }
  });

  it('the review, as HTML and as CSV, carries the text inert', async () => {
    const html = await t.app.inject({ url: '/v1/units/hostile-1/review', headers: bearer(t.keys.viewer) });
    expect(html.statusCode).toBe(200);
    expect(html.body).not.toMatch(/<script/i);
    expect(html.body).toContain('&lt;script&gt;');
    const page = await browser.newPage();
    await page.setContent(html.body);
    expect(await ran(page)).toBeNull();
    expect(await page.textContent('body')).toContain(`Unit ${PRINTED}`);
    await page.close();
    const csv = await t.app.inject({ url: '/v1/units/hostile-1/review?format=csv', headers: bearer(t.keys.viewer) });
    expect(csv.statusCode).toBe(200);
    for (const line of csv.body.split('\n')) for (const cell of line.split(',')) expect(cell).not.toMatch(/^"?[=+@\t\r]/);
  });

  it("the alert's history keeps the shelve reason as written", async () => {
    const a = (await t.app.inject({ url: `/v1/alerts/${shelvedId}`, headers: bearer(t.keys.viewer) })).json();
    expect(a.history.find((h: { action: string }) => h.action === 'shelved').comment).toBe(`Reason ${HOSTILE}`);
  });
});
