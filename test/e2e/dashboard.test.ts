/**
 * The dashboard in a real browser (Debian's Chromium, headless, driven by playwright-core) on a
 * small demo fleet made through the real code paths: units registered through the API, rings
 * sent to the ingest endpoint as NDJSON, analysed by the worker (rollups, first baseline,
 * alerts). Checks the fleet board, the ring plot, a viewer seeing no action buttons, and an
 * operator acknowledging an alert. Screenshots go to test/artifacts/ (not committed).
 * Skipped, with the reason printed, when /usr/bin/chromium is absent.
 */
import { existsSync, mkdirSync, mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { BrowserContext, Page } from 'playwright-core';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { demoFleet, simulateUnit, type SimUnit } from '../../services/sim/index.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { analysisTotals } from '../../services/db/analysis.ts';
import { createLogger } from '../../services/db/logger.ts';

const CHROMIUM = '/usr/bin/chromium';
const hasChromium = existsSync(CHROMIUM);
if (!hasChromium) console.log(`e2e dashboard tests skipped: ${CHROMIUM} is not installed (apt-get install -y chromium)`);

const ARTIFACTS = path.resolve('test/artifacts');
const HOUR = 3_600_000;

let t: TestApp;
let worker: Worker;
let browser: BrowserContext;
let base: string;
let profile: string;

/** Three demo units over the last hours, with a thermocouple opening and a chamber losing flame near the end. */
function fleet(nowMs: number): SimUnit[] {
  const [hp1, hp2, kf1] = demoFleet(new Date(nowMs).toISOString());
  const steady = { profile: 'base' as const, tripsPerYear: 0 };
  return [
    { ...hp1, dispatch: steady, faults: [] },
    { ...hp2, dispatch: steady, faults: [{ kind: 'tc_open', thermocouple: 5, at: new Date(nowMs - 1.5 * HOUR).toISOString(), readsC: -18 }] },
    { ...kf1, dispatch: steady, faults: [{ kind: 'flame_loss', chamber: 6, at: new Date(nowMs - 1 * HOUR).toISOString(), durationH: 6, depthFrac: 0.6 }] },
  ];
}

async function until(what: string, check: () => Promise<boolean>, timeoutMs = 90_000): Promise<void> {
  const end = Date.now() + timeoutMs;
  while (!(await check())) {
    if (Date.now() > end) throw new Error(`timed out waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 250));
  }
}

async function shot(page: Page, name: string): Promise<void> {
  await page.screenshot({ path: path.join(ARTIFACTS, name), fullPage: true });
}

describe.skipIf(!hasChromium)('dashboard in a browser', () => {
  const problems: string[] = [];

  beforeAll(async () => {
    mkdirSync(ARTIFACTS, { recursive: true });
    t = await createTestApp({
      env: { CANSIGHT_WORKER_LEASE_S: '4', CANSIGHT_WORKER_CLAIM_EVERY_S: '1', CANSIGHT_WORKER_SWEEP_CRON: '*/2 * * * * *', CANSIGHT_BASELINE_AUTO_DAYS: '0.15', CANSIGHT_RATE_LIMIT_PER_MIN: '100000' },
    });
    const now = Date.now();
    const units = fleet(now);
    for (const u of units) {
      const { id, name, site, ...config } = u.config;
      const res = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: { id, name, site, ...config } });
      expect(res.statusCode, res.body).toBe(201);
    }
    // Rings through the ingest endpoint, as a gateway sends them.
    for (const u of units) {
      const sim = simulateUnit(u, { from: new Date(now - 8 * HOUR).toISOString(), to: new Date(now - 30_000).toISOString(), seed: 11 });
      const lines = [...sim.rings()].map((r) => JSON.stringify(r)).join('\n');
      const res = await t.app.inject({ method: 'POST', url: '/v1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/x-ndjson' }, payload: lines });
      expect(res.statusCode, res.body).toBe(200);
      expect(res.json().rejected).toEqual([]);
    }
    worker = await startWorker({ pool: t.db.pool, logger: createLogger(t.config.logLevel), config: t.config, workerId: 'w-e2e' });
    await until('the worker to analyse every ring', async () => {
      const s = await analysisTotals(t.db.pool);
      return s.stored > 0 && s.analysed === s.stored;
    });
    await worker.settled();
    await until('an active alert', async () => ((await t.app.inject({ url: '/v1/alerts?state=active', headers: bearer(t.keys.viewer) })).json().alerts ?? []).length > 0);
    base = await t.app.listen({ host: '127.0.0.1', port: 0 });
    const { chromium } = await import('playwright-core');
    profile = mkdtempSync(path.join(os.tmpdir(), 'cansight-chromium-'));
    // A fresh profile directory (playwright passes it as --user-data-dir).
    browser = await chromium.launchPersistentContext(profile, {
      executablePath: CHROMIUM,
      headless: true,
      args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
      viewport: { width: 1280, height: 900 },
    });
  }, 240_000);

  afterAll(async () => {
    await browser?.close();
    await worker?.stop();
    await t?.close();
    if (profile) rmSync(profile, { recursive: true, force: true });
  });

  async function open(key: string): Promise<Page> {
    // Each page is its own tab, so each has its own sessionStorage (its own key).
    const page = await browser.newPage();
    page.on('console', (m) => {
      if (m.type() === 'error') problems.push(`console: ${m.text()}`);
    });
    page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
    await page.goto(base + '/');
    await page.fill('#key-input', key);
    await page.click('#key-form button[type=submit]');
    await page.waitForSelector('#fleet-board tbody tr[data-unit]');
    return page;
  }

  it('shows the fleet board ranked by worst active alert, with freshness', async () => {
    const page = await open(t.keys.viewer);
    const rows = await page.$$eval('#fleet-board tbody tr[data-unit]', (trs) => trs.map((tr) => ({ unit: tr.getAttribute('data-unit'), grade: tr.getAttribute('data-grade'), text: tr.textContent ?? '' })));
    expect(rows).toHaveLength(3);
    const rank = (g: string | null) => ['none', 'notice', 'warning', 'alarm', 'critical'].indexOf(g ?? 'none');
    for (let i = 1; i < rows.length; i++) expect(rank(rows[i - 1].grade)).toBeGreaterThanOrEqual(rank(rows[i].grade));
    expect(rows[0].grade).not.toBe('none');
    expect(rows.some((r) => r.unit === 'hp-1')).toBe(true);
    for (const r of rows) expect(r.text).toMatch(/live|late/);
    expect(await page.textContent('footer.caution')).toContain('Cansight advises; it does not protect.');
    expect(await page.textContent('#who')).toContain('viewer');
    await shot(page, 'fleet-board.png');
    await page.close();
  });

  it('draws the ring plot of a unit with every thermocouple, and a viewer gets no action buttons', async () => {
    const page = await open(t.keys.viewer);
    await page.click('#fleet-board tr[data-unit="hp-2"] a.unit-link');
    await page.waitForSelector('#ring-plot svg g.thermocouple');
    expect(await page.$$eval('#ring-plot svg g.thermocouple', (g) => g.length)).toBe(18);
    expect(await page.$$eval('#ring-plot svg g.chamber', (g) => g.length)).toBe(10);
    await page.waitForSelector('#spread-trend svg');
    await page.waitForSelector('#chamber-table table');
    await page.waitForSelector('#unit-alerts li.alert');
    expect(await page.$$('button.ack')).toHaveLength(0);
    expect(await page.textContent('#unit-alerts')).toContain('operator key');
    await shot(page, 'unit-viewer.png');
    await page.close();
  });

  it('lets an operator acknowledge an alert, and the server records it', async () => {
    const page = await open(t.keys.operator);
    const target = (await t.app.inject({ url: '/v1/alerts?state=active', headers: bearer(t.keys.viewer) })).json().alerts.find((a: { acknowledged: boolean }) => !a.acknowledged);
    expect(target).toBeDefined();
    await page.goto(`${base}/#/unit/${target.unitId}`);
    const item = `#unit-alerts li[data-alert="${target.id}"]`;
    await page.waitForSelector(`${item} button.ack`);
    await page.click(`${item} button.ack`);
    expect(await page.textContent(`${item} .action-msg`)).toContain('Write your name first');
    await page.fill('#actor-name', 'E. Engineer');
    await page.click(`${item} button.ack`);
    await page.waitForSelector(`${item} button.ack:disabled`);
    expect(await page.textContent(`${item} button.ack`)).toBe('Acknowledged');
    const after = (await t.app.inject({ url: `/v1/alerts/${target.id}`, headers: bearer(t.keys.viewer) })).json();
    expect(after.acknowledged).toBe(true);
    expect(JSON.stringify(after.history)).toContain('E. Engineer');
    await shot(page, 'unit-operator-acknowledged.png');
    await page.goto(`${base}/#/unit/${target.unitId}/chamber/1`);
    await page.waitForSelector('#chamber-trend svg');
    await page.waitForSelector('#chamber-evidence dl');
    await shot(page, 'chamber.png');
    await page.close();
  });

  it('loads with no script error and no content-policy violation', () => {
    expect(problems).toEqual([]);
  });
});
