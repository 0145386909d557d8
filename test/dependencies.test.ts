/**
 * Every package that `npm ci` installs runs on each Node.js line the project names in its
 * `engines` field (the lowest release of each line: 20.19, 22.12, 24.0), so that an install on
 * any of them prints no engine warning. Checked against the lock file with the semver package
 * (npm's own range rules). Node 20 left maintenance in April 2026 (Node.js release schedule):
 * 22 and 24 must work as well.
 */
import { existsSync, readFileSync } from 'node:fs';
import semver from 'semver';
import { describe, expect, it } from 'vitest';

const root = new URL('../', import.meta.url);
const pkg = JSON.parse(readFileSync(new URL('package.json', root), 'utf8'));
const lock = JSON.parse(readFileSync(new URL('package-lock.json', root), 'utf8'));
const LINES = ['20', '22', '24'];

describe('Node.js versions', () => {
  it('the engines field names Node 20, 22 and 24', () => {
    for (const line of LINES) expect(semver.minVersion(pkg.engines.node) && semver.intersects(pkg.engines.node, `${line}.x`), line).toBe(true);
  });

  it('no installed package needs a Node.js newer than the lowest release the engines field allows on each line', () => {
    // The lowest release of each line that the project's own range allows.
    const lowest = LINES.map((line) => semver.minVersion(semver.validRange(`${line}.x`)!)!)
      .map((v) => [v.version, ...Array.from({ length: 40 }, (_, i) => `${v.major}.${i}.0`)].find((x) => semver.satisfies(x, pkg.engines.node))!);
    expect(lowest).toEqual(['20.19.0', '22.12.0', '24.0.0']);
    const refused: string[] = [];
    for (const [where, entry] of Object.entries(lock.packages as Record<string, { engines?: { node?: string }; optional?: boolean; os?: string[]; cpu?: string[] }>)) {
      const range = entry.engines?.node;
      if (!where || !range) continue;
      // Optional packages for other platforms (native or wasm builds) are skipped by npm.
      if (entry.optional && !existsSync(new URL(where + '/', root))) continue;
      for (const v of lowest) if (!semver.satisfies(v, range)) refused.push(`${where} needs node ${range}; ${v} is allowed by package.json`);
    }
    expect(refused).toEqual([]);
  });
});
