/**
 * The README documents every environment variable the configuration loader reads; every
 * command of the `cansight` usage table exists in the dispatcher and in the contributor guide,
 * whose examples name units the demo fleet has.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { COMMANDS } from '../services/cli/usage.ts';
import { demoFleetConfigs } from '../services/sim/fleet.ts';

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

  it('every command of the usage table is handled by the dispatcher and named in the contributor guide', () => {
    const main = read('../services/cli/main.ts');
    const commands = new Set(Object.values(COMMANDS).map((c) => c.name.split(' ')[0]));
    expect(commands.size).toBeGreaterThan(5);
    for (const c of commands) expect(main, c).toContain(`case '${c}'`);
    const guide = read('../DEVELOPERS.md');
    const listed = /cli\/\s+the command's sub-commands: ([^;]+);/.exec(guide)?.[1] ?? '';
    for (const c of commands) expect(listed.split(/,\s*/), c).toContain(c);
  });

  it('the contributor guide\'s examples name units of the demo fleet', () => {
    const guide = read('../DEVELOPERS.md');
    const ids = new Set(demoFleetConfigs().map((u) => u.id));
    const named = [...guide.matchAll(/--units? ([a-z0-9,-]+)/g)].flatMap((m) => m[1].split(','));
    expect(named.length).toBeGreaterThan(0);
    for (const id of named) expect([...ids], id).toContain(id);
  });
});
