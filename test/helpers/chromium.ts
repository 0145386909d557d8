/**
 * Debian's Chromium, headless, driven by playwright-core, with a fresh profile directory that
 * close() removes. Tests that need it skip themselves when it is not installed.
 */
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import type { BrowserContext } from 'playwright-core';

export const CHROMIUM = '/usr/bin/chromium';
export const hasChromium = existsSync(CHROMIUM);

export async function launchChromium(viewport = { width: 1280, height: 900 }): Promise<{ browser: BrowserContext; close(): Promise<void> }> {
  const { chromium } = await import('playwright-core');
  // A fresh profile directory (playwright passes it as --user-data-dir).
  const profile = mkdtempSync(path.join(os.tmpdir(), 'cansight-chromium-'));
  const browser = await chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM,
    headless: true,
    args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
    viewport,
  });
  return {
    browser,
    async close() {
      await browser.close();
      rmSync(profile, { recursive: true, force: true });
    },
  };
}
