/**
 * No part imports a sibling or a part above it. The parts of services/ and what each may
 * import (DEVELOPERS.md, "Layout", holds the same table); read from the real import and
 * re-export statements of every file, type-only and dynamic imports included.
 */
import { fileURLToPath } from 'node:url';
import { join, relative, sep } from 'node:path';
import { readdirSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { importsOf, readSource, resolvedFrom, sourceFiles } from './helpers/imports.ts';

const ALL = ['core', 'db', 'http', 'ingest', 'worker', 'api', 'sim', 'scorecard', 'cli'];

/** Part → the other parts it may import. bench/ and test/ compose everything and are not checked. */
const MAY_IMPORT: Record<string, readonly string[]> = {
  core: [],
  db: ['core'],
  http: ['db', 'core'],
  ingest: ['http', 'db', 'core'],
  api: ['http', 'db', 'core'],
  worker: ['db', 'core'],
  sim: ['core'],
  scorecard: ALL,
  cli: ALL,
};

const root = fileURLToPath(new URL('../', import.meta.url));

/** "services/<part>/…" → part, or null for a path outside services/. */
function partOf(path: string): string | null {
  const m = /^services\/([^/]+)\//.exec(path);
  return m ? m[1] : null;
}

/** Each file of services/ and the files of ours it imports, as paths from the root. */
function importGraph(): Map<string, string[]> {
  const graph = new Map<string, string[]>();
  for (const file of sourceFiles(join(root, 'services'))) {
    const targets = importsOf(readSource(file)).map((spec) => resolvedFrom(root, file, spec)).filter((t): t is string => t !== null);
    graph.set(relative(root, file).split(sep).join('/'), targets);
  }
  return graph;
}

/** The import circles of a graph, each as "a → b → … → a". */
function circles(graph: Map<string, string[]>): string[] {
  const found: string[] = [];
  const done = new Set<string>();
  const path: string[] = [];
  const visit = (n: string) => {
    path.push(n);
    for (const m of graph.get(n) ?? []) {
      const at = path.indexOf(m);
      if (at >= 0) found.push([...path.slice(at), m].join(' → '));
      else if (!done.has(m)) visit(m);
    }
    path.pop();
    done.add(n);
  };
  for (const n of graph.keys()) if (!done.has(n)) visit(n);
  return found;
}

/** Every import of a file in services/ that its part may not make, as "file → target". */
function violations(): string[] {
  const out: string[] = [];
  for (const file of sourceFiles(join(root, 'services'))) {
    const rel = relative(root, file).split(sep).join('/');
    const from = partOf(rel) as string;
    const allowed = MAY_IMPORT[from] ?? [];
    for (const spec of importsOf(readSource(file))) {
      const target = resolvedFrom(root, file, spec);
      if (target === null) continue;
      const to = partOf(target);
      if (to === from) continue;
      if (to === null || !allowed.includes(to)) out.push(`${rel} → ${target}`);
    }
  }
  return out;
}

describe('import rule: no part imports a sibling or a part above it', () => {
  it('reads import, import type, export from, bare and dynamic imports, and nothing in comments or strings', () => {
    const src = [
      "import a, { b as c, type D } from './one.ts';",
      "import type { E } from '../two.ts';",
      "export { f } from './three.ts';",
      "export * as g from './four.ts';",
      "export type { H } from './five.ts';",
      "import './six.ts';",
      'const m = await import("./seven.ts");',
      "// import x from './not-a.ts'",
      "/* export { y } from './not-b.ts' */",
      "const s = \"import z from './not-c.ts'\";",
      "const r = s.replace(/'/g, \"''\"); const q = `${s} import w from './not-d.ts' ${`${r}`}`;",
      "export const k = import.meta.url;",
      "import {\n  l,\n  n,\n} from './eight.ts';",
    ].join('\n');
    expect(importsOf(src)).toEqual(['./one.ts', '../two.ts', './three.ts', './four.ts', './five.ts', './six.ts', './seven.ts', './eight.ts']);
  });

  it('every folder of services/ has a row in the table', () => {
    const parts = readdirSync(join(root, 'services'), { withFileTypes: true }).filter((e) => e.isDirectory()).map((e) => e.name);
    expect(parts.filter((p) => !(p in MAY_IMPORT))).toEqual([]);
  });

  it('no file in services/ imports a part its own part may not import', () => {
    expect(violations()).toEqual([]);
  });

  it('no file in services/ imports itself back through others (no import circle)', () => {
    expect(circles(new Map([['a', ['b']], ['b', ['c']], ['c', ['a']], ['d', ['a']]]))).toEqual(['a → b → c → a']);
    expect(circles(importGraph())).toEqual([]);
  });
});
