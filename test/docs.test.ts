/**
 * The README documents every environment variable the configuration loader reads, and every
 * command the `cansight` usage text lists exists in the dispatcher.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';

const read = (p: string) => readFileSync(new URL(p, import.meta.url), 'utf8');

describe('documentation', () => {
  it('README names every environment variable of services/db/config.ts', () => {
    const config = read('../services/db/config.ts');
    const names = new Set([...config.matchAll(/env, '([A-Z][A-Z0-9_]+)'/g)].map((m) => m[1]));
    expect(names.size).toBeGreaterThan(30);
    const readme = read('../README.md');
    const missing = [...names].filter((n) => !readme.includes('`' + n) && !readme.includes(n + '`'));
    expect(missing).toEqual([]);
  });

  it('every command in the usage text is handled by the dispatcher', () => {
    const usage = read('../services/cli/usage.ts');
    const main = read('../services/cli/main.ts');
    const commands = new Set([...usage.matchAll(/^ {2}cansight ([a-z]+)/gm)].map((m) => m[1]));
    expect(commands.size).toBeGreaterThan(5);
    for (const c of commands) expect(main, c).toContain(`case '${c}'`);
  });
});
