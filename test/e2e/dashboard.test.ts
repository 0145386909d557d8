/**
 * The dashboard in a real browser (Debian's Chromium, headless, driven by playwright-core) on a
 * small demo fleet made through the real code paths: units registered through the API, rings
 * sent to the ingest endpoint as NDJSON, analysed by the worker (rollups, first baseline,
 * alerts, starts). Checks the fleet board, the ring plot, a viewer seeing no action buttons, an
 * operator acknowledging an alert, a unit's starts (counters, start-by-start trend, recent
 * starts with outcome, phase timeline and crossfire time) and a start's own page (its picture,
 * per-chamber lighting, findings). Screenshots go to test/artifacts/ (not committed).
 * Skipped, with the reason printed, when /usr/bin/chromium is absent.
 */
import { mkdirSync } from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { BrowserContext, Page } from 'playwright-core';
import { CHROMIUM, hasChromium, launchChromium } from '../helpers/chromium.ts';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { demoFleet, simulateUnit, type SimUnit } from '../../services/sim/index.ts';
import { startWorker, type Worker } from '../../services/worker/index.ts';
import { analysisTotals } from '../../services/db/progress.ts';
import { createLogger } from '../../services/db/logger.ts';

if (!hasChromium) console.log(`e2e dashboard tests skipped: ${CHROMIUM} is not installed (apt-get install -y chromium)`);

const ARTIFACTS = path.resolve('test/artifacts');
const HOUR = 3_600_000;
const DAY = 86_400_000;
/** Days of history of the peaking unit: it starts every morning, so it has START_DAYS − 1 starts or more. */
const START_DAYS = 4;
/** Where the peaking unit's history begins: noon UTC, START_DAYS days ago (never inside a start). */
const startsFrom = (nowMs: number) => Math.floor((nowMs - START_DAYS * DAY) / DAY) * DAY + 12 * HOUR;

let t: TestApp;
let worker: Worker;
let browser: BrowserContext;
let base: string;
let chrome: Awaited<ReturnType<typeof launchChromium>> | undefined;

/**
 * Three demo units over the last hours, with a thermocouple opening and a chamber losing flame
 * near the end, and the peaking demo unit (kf-2) over the last days with a start every morning,
 * the first of them failing to crossfire chamber 11 (that start trips; the retry lights it).
 */
function fleet(nowMs: number): SimUnit[] {
  const [hp1, hp2, kf1, kf2] = demoFleet(new Date(nowMs).toISOString());
  const steady = { profile: 'base' as const, tripsPerYear: 0 };
  return [
    { ...hp1, dispatch: steady, faults: [] },
    { ...hp2, dispatch: steady, faults: [{ kind: 'tc_open', thermocouple: 5, at: new Date(nowMs - 1.5 * HOUR).toISOString(), readsC: -18 }] },
    { ...kf1, dispatch: steady, faults: [{ kind: 'flame_loss', chamber: 6, at: new Date(nowMs - 1 * HOUR).toISOString(), durationH: 6, depthFrac: 0.6 }] },
    { ...kf2, dispatch: { profile: 'peaking', weekendRunChance: 1, tripsPerYear: 0 }, faults: [{ kind: 'crossfire_failure', chamber: 11, at: new Date(startsFrom(nowMs) + 6 * HOUR).toISOString() }] },
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
      const from = u.dispatch.profile === 'peaking' ? startsFrom(now) : now - 8 * HOUR;
      const sim = simulateUnit(u, { from: new Date(from).toISOString(), to: new Date(now - 30_000).toISOString(), seed: 11 });
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
    chrome = await launchChromium();
    browser = chrome.browser;
  }, 240_000);

  afterAll(async () => {
    await chrome?.close();
    await worker?.stop();
    await t?.close();
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
    expect(rows).toHaveLength(4);
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
    const hp2 = fleet(Date.now())[1].config;
    expect(await page.$$eval('#ring-plot svg g.thermocouple', (g) => g.length)).toBe(hp2.thermocouples.count);
    expect(await page.$$eval('#ring-plot svg g.chamber', (g) => g.length)).toBe(hp2.chambers.count);
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
    await page.fill('#actor-name', 'combustion engineer 1');
    await page.click(`${item} button.ack`);
    await page.waitForSelector(`${item} button.ack:disabled`);
    expect(await page.textContent(`${item} button.ack`)).toBe('Acknowledged');
    const after = (await t.app.inject({ url: `/v1/alerts/${target.id}`, headers: bearer(t.keys.viewer) })).json();
    expect(after.acknowledged).toBe(true);
    expect(JSON.stringify(after.history)).toContain('combustion engineer 1');
    await shot(page, 'unit-operator-acknowledged.png');
    await page.goto(`${base}/#/unit/${target.unitId}/chamber/1`);
    await page.waitForSelector('#chamber-trend svg');
    await page.waitForSelector('#chamber-evidence dl');
    await shot(page, 'chamber.png');
    await page.close();
  });

  it('offers a swirl what-if from the chamber page: the stored rings re-mapped with a candidate curve, side by side', async () => {
    const page = await open(t.keys.viewer);
    // kf-1, whose chamber 6 lost its flame in the last hour.
    const unit = fleet(Date.now())[2].config;
    await page.goto(`${base}/#/unit/${unit.id}/chamber/6`);
    await page.waitForSelector('#what-if-run');
    // The configured curve is filled in, as load %: degrees.
    expect(await page.inputValue('#what-if-curve')).toBe(unit.swirl.curve.map(([l, d]) => `${Math.round(l * 100)}: ${d}`).join(', '));
    await page.fill('#what-if-curve', 'not a curve');
    await page.click('#what-if-run');
    expect(await page.textContent('#what-if-result')).toContain('load %: degrees pairs');
    await page.fill('#what-if-curve', unit.swirl.curve.map(([l, d]) => `${Math.round(l * 100)}: ${d + 15}`).join(', '));
    await page.selectOption('#what-if-days', '1');
    await page.click('#what-if-run');
    await page.waitForSelector('#what-if-result table tbody tr');
    expect(await page.$$eval('#what-if-result tbody tr', (r) => r.length)).toBe(unit.chambers.count);
    expect(await page.getAttribute('#what-if-result tr[data-chamber="6"]', 'class')).toBe('this');
    expect(await page.textContent('#what-if-result')).toMatch(/\d+ steady rings of \d+ re-mapped/);
    await shot(page, 'chamber-what-if.png');
    await page.close();
  });

  it('says on a unit page what is not judged yet, and why', async () => {
    const { id, name, site, ...config } = fleet(Date.now())[0].config;
    const fresh = await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: { id: 'e2e-new', name: `${name} (new)`, site, ...config } });
    expect(fresh.statusCode, fresh.body).toBe(201);
    expect(id).not.toBe('e2e-new');
    const page = await open(t.keys.viewer);
    await page.goto(`${base}/#/unit/e2e-new`);
    await page.waitForSelector('#not-judged');
    const text = (await page.textContent('#not-judged')) ?? '';
    expect(text).toContain('Not judged yet.');
    expect(text).toContain('No ring has been stored for this unit yet; send rings to POST /v1/units/e2e-new/rings.');
    expect(text).toContain('POST /v1/units/e2e-new/baselines');
    await page.goto(`${base}/#/unit/hp-2`);
    await page.waitForFunction(() => document.querySelector('.pagehead .sub')?.textContent?.startsWith('hp-2 ·'));
    await page.waitForSelector('#ring-plot svg');
    // Another unit's page says exactly what its status says is not judged (nothing, once judged).
    await page.waitForSelector('#chamber-table table');
    const said = (await t.app.inject({ url: '/v1/units/hp-2/status', headers: bearer(t.keys.viewer) })).json().notJudged as { reason: string }[];
    const box = await page.$('#not-judged');
    if (said.length === 0) expect(box).toBeNull();
    else for (const x of said) expect((await box!.textContent()) ?? '').toContain(x.reason);
    await page.close();
  });

  it('draws the page followed to while the previous one was still drawing', async () => {
    const page = await open(t.keys.viewer);
    // hp-1's ring picture is held back, so its page is still drawing when the next link is followed.
    let release!: () => void;
    const held = new Promise<void>((r) => (release = r));
    await page.route('**/v1/units/hp-1/ring.svg', async (route) => {
      await held;
      await route.continue();
    });
    await page.goto(`${base}/#/unit/hp-1`);
    await page.waitForSelector('#ring-plot');
    await page.evaluate(() => (location.hash = '#/unit/kf-1'));
    release();
    await page.waitForFunction(() => document.querySelector('.pagehead .sub')?.textContent?.startsWith('kf-1 ·'), undefined, { timeout: 10_000 });
    await page.waitForSelector('#ring-plot svg');
    expect(await page.textContent('.pagehead .sub')).toMatch(/^kf-1 ·/);
    await page.close();
  });

  it('shows a unit\'s starts: counters, the start-by-start trend, and the recent starts with outcome, phase timeline and crossfire time', async () => {
    const api = (await t.app.inject({ url: '/v1/units/kf-2/starts', headers: bearer(t.keys.viewer) })).json();
    expect(api.starts.length).toBeGreaterThanOrEqual(START_DAYS - 1);
    expect(api.starts.some((s: { outcome: string }) => s.outcome === 'aborted')).toBe(true);
    const page = await open(t.keys.viewer);
    await page.click('#fleet-board tr[data-unit="kf-2"] a.unit-link');
    await page.waitForSelector('#start-table tbody tr[data-start]');
    await page.waitForSelector('#starts-trend svg');
    expect(await page.textContent('#start-counters')).toContain(`${api.counters.firedStarts} fired starts · ${api.counters.failedStarts} failed`);
    const rows = await page.$$eval('#start-table tbody tr[data-start]', (trs) =>
      trs.map((tr) => ({ id: tr.getAttribute('data-start'), outcome: tr.getAttribute('data-outcome'), cells: [...tr.querySelectorAll('td')].map((td) => td.textContent ?? ''), phases: [...tr.querySelectorAll('.timeline [data-phase]')].map((x) => x.getAttribute('data-phase')) })),
    );
    expect(rows.map((r) => r.id)).toEqual(api.starts.slice(0, 12).map((s: { startId: string }) => s.startId));
    for (const [i, r] of rows.entries()) {
      const s = api.starts[i];
      expect(r.outcome).toBe(s.outcome);
      expect(r.phases).toEqual(s.phases.map((p: { phase: string }) => p.phase));
      expect(r.cells[3]).toBe(s.crossfireCompleteS === null ? 'not complete' : `${s.crossfireCompleteS.toFixed(1)} s`);
    }
    const aborted = rows.find((r) => r.outcome === 'aborted')!;
    expect(aborted.cells[1]).toMatch(/^aborted in /);
    expect(aborted.cells[6]).toContain('unlit: 11');
    const completed = rows.find((r) => r.outcome === 'completed')!;
    expect(completed.phases).toContain('full_speed_no_load');
    // The trend draws every start of the window, in order, once in each panel.
    const drawn = await page.$$eval('#starts-trend svg g.crossfire [data-start]', (xs) => xs.map((x) => x.getAttribute('data-start')));
    expect(drawn).toEqual(api.starts.map((s: { startId: string }) => s.startId).reverse());
    expect(await page.$$eval('#starts-trend svg g.spread-fsnl [data-start]', (xs) => xs.length)).toBe(api.starts.length);
    await shot(page, 'unit-starts.png');
    await page.close();
  });

  it('shows a start\'s own page: its picture, phases, per-chamber lighting and findings, with the caution', async () => {
    const api = (await t.app.inject({ url: '/v1/units/kf-2/starts', headers: bearer(t.keys.viewer) })).json();
    const aborted = api.starts.find((s: { outcome: string }) => s.outcome === 'aborted');
    const page = await open(t.keys.viewer);
    await page.goto(`${base}/#/unit/kf-2`);
    await page.waitForSelector(`#start-table tr[data-start="${aborted.startId}"] a.start-link`);
    await page.click(`#start-table tr[data-start="${aborted.startId}"] a.start-link`);
    await page.waitForSelector('#start-picture svg');
    expect(await page.textContent('#crumbs')).toContain('Start ');
    expect(await page.textContent('#start-outcome')).toMatch(/^aborted in /);
    expect(await page.$$eval('#start-picture svg rect.phase', (r) => r.map((x) => x.getAttribute('data-phase')))).toEqual(aborted.phases.map((p: { phase: string }) => p.phase));
    expect(await page.$$eval('#start-phases tbody tr', (r) => r.length)).toBe(aborted.phases.length);
    const chambers = fleet(Date.now())[3].config.chambers.count;
    expect(await page.$$eval('#start-lighting tbody tr', (r) => r.length)).toBe(chambers);
    expect(await page.getAttribute('#start-lighting tr[data-chamber="11"]', 'class')).toBe('unlit');
    expect(await page.textContent('#start-lighting tr[data-chamber="11"]')).toContain('not lit');
    const findings = (await page.textContent('#start-findings')) ?? '';
    expect(findings).toContain('chamber unlit · chamber 11');
    expect(await page.textContent('.caution-note')).toContain('Cansight advises');
    expect(await page.textContent('footer.caution')).toContain('Cansight advises; it does not protect.');
    await shot(page, 'start-aborted.png');
    // A completed start names full speed no load in words, in its phase table and its picture.
    const completed = api.starts.find((s: { outcome: string }) => s.outcome === 'completed');
    await page.goto(`${base}/#/unit/kf-2/start/${completed.startId}`);
    await page.waitForSelector('#start-phases tr[data-phase="full_speed_no_load"]');
    await page.waitForSelector('#start-picture svg rect.phase[data-phase="full_speed_no_load"]');
    expect(await page.textContent('#start-phases tr[data-phase="full_speed_no_load"]')).toContain('full speed no load');
    expect(await page.$$eval('#start-picture svg text', (ts) => ts.map((x) => x.textContent))).toContain('full speed no load');
    expect(await page.textContent('#start-findings')).toContain('No finding');
    await shot(page, 'start-completed.png');
    await page.close();
  });

  it('shows a progress bar on the page of a unit whose analysis is behind its rings, and none once caught up', async () => {
    const page = await open(t.keys.viewer);
    // hp-1 is caught up: no bar.
    await page.goto(`${base}/#/unit/hp-1`);
    await page.waitForSelector('#chamber-table table');
    expect(await page.$('#catching-up')).toBeNull();
    // The same unit as a history import leaves it: its status says 3,000 of 12,000 rings analysed.
    await page.route('**/v1/units/hp-1/status', async (route) => {
      const real = await route.fetch();
      const status = await real.json();
      status.progress = { ...status.progress, ringsStored: 12_000, ringsAnalysed: 3_000, ringsPending: 9_000, watermarkTs: '2026-02-01T00:00:00.000Z' };
      await route.fulfill({ response: real, json: status });
    });
    await page.goto(`${base}/#/`);
    await page.waitForSelector('#fleet-board tbody tr[data-unit]');
    await page.goto(`${base}/#/unit/hp-1`);
    await page.waitForSelector('#catching-up progress');
    expect(await page.getAttribute('#catching-up progress', 'value')).toBe('3000');
    expect(await page.getAttribute('#catching-up progress', 'max')).toBe('12000');
    expect(await page.textContent('#catching-up')).toContain('3,000 of 12,000 rings analysed (25 %), 9,000 left');
    await shot(page, 'unit-catching-up.png');
    await page.close();
  });

  it('shows how far a re-analysis has come: a quarter of its ring time judged again', async () => {
    const page = await open(t.keys.viewer);
    await page.route('**/v1/units/hp-1/status', async (route) => {
      const real = await route.fetch();
      const status = await real.json();
      // Judged again from 1 February to 1 March 2026 (28 days), up to 8 February: 7 of 28 days.
      status.progress = {
        ...status.progress,
        watermarkTs: '2026-02-08T00:00:00.000Z',
        reanalysis: { fromTs: '2026-02-01T00:00:00.000Z', toTs: '2026-03-01T00:00:00.000Z', ringsLeft: 30_240, askedFromTs: null },
      };
      await route.fulfill({ response: real, json: status });
    });
    await page.goto(`${base}/#/`);
    await page.waitForSelector('#fleet-board tbody tr[data-unit]');
    await page.goto(`${base}/#/unit/hp-1`);
    await page.waitForSelector('#catching-up progress');
    expect(await page.getAttribute('#catching-up progress', 'value')).toBe('25');
    const text = await page.textContent('#catching-up');
    expect(text).toContain('Judging the history again.');
    expect(text).toContain('25 % of the ring time');
    expect(text).toContain('30,240 rings left');
    await page.close();
  });

  it('loads with no script error and no content-policy violation', () => {
    expect(problems).toEqual([]);
  });
});
