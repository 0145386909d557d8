/**
 * The modules a TypeScript or JavaScript file imports, read from its text: `import … from`,
 * `import type … from`, `export … from`, a bare `import '…'` and a dynamic `import('…')`.
 * A small tokenizer skips comments, strings, template literals and regular expressions first,
 * so an import written inside a comment or a message is not taken for one.
 */
import { readdirSync, readFileSync } from 'node:fs';
import { dirname, join, relative, resolve, sep } from 'node:path';

type Token = { kind: 'word' | 'string' | 'punct' | 'other'; text: string };

/** Words after which a `/` starts a regular expression, not a division. */
const BEFORE_REGEX = new Set(['return', 'typeof', 'case', 'do', 'else', 'in', 'of', 'new', 'delete', 'void', 'throw', 'instanceof', 'yield', 'await']);

/** The tokens that matter for imports: words, string literals and punctuation. */
export function tokens(src: string): Token[] {
  const out: Token[] = [];
  /** Brace depth at which each open template expression (`${`) returns to its template. */
  const templates: number[] = [];
  let depth = 0;
  let i = 0;
  const last = () => out[out.length - 1];
  const regexAllowed = () => {
    const t = last();
    if (!t) return true;
    if (t.kind === 'word') return BEFORE_REGEX.has(t.text);
    if (t.kind === 'string' || t.kind === 'other') return false;
    return t.text !== ')' && t.text !== ']' && t.text !== '}';
  };
  /** Reads template text from i (after a backtick or a closing `}`) to its end or its next `${`. */
  const templateText = () => {
    while (i < src.length) {
      const c = src[i];
      if (c === '\\') i += 2;
      else if (c === '`') {
        i++;
        out.push({ kind: 'other', text: 'template' });
        return;
      } else if (c === '$' && src[i + 1] === '{') {
        i += 2;
        templates.push(depth);
        depth++;
        out.push({ kind: 'punct', text: '(' });
        return;
      } else i++;
    }
  };
  while (i < src.length) {
    const c = src[i];
    if (c === '/' && src[i + 1] === '/') {
      while (i < src.length && src[i] !== '\n') i++;
    } else if (c === '/' && src[i + 1] === '*') {
      const end = src.indexOf('*/', i + 2);
      i = end < 0 ? src.length : end + 2;
    } else if (c === "'" || c === '"') {
      let j = i + 1;
      let text = '';
      while (j < src.length && src[j] !== c && src[j] !== '\n') {
        if (src[j] === '\\') j++;
        else text += src[j];
        j++;
      }
      out.push({ kind: 'string', text });
      i = j + 1;
    } else if (c === '`') {
      i++;
      templateText();
    } else if (c === '/' && regexAllowed()) {
      let j = i + 1;
      let inClass = false;
      while (j < src.length && src[j] !== '\n' && (inClass || src[j] !== '/')) {
        if (src[j] === '\\') j++;
        else if (src[j] === '[') inClass = true;
        else if (src[j] === ']') inClass = false;
        j++;
      }
      j++;
      while (j < src.length && /[a-z]/i.test(src[j])) j++;
      out.push({ kind: 'other', text: 'regex' });
      i = j;
    } else if (/[A-Za-z_$]/.test(c)) {
      let j = i + 1;
      while (j < src.length && /[\w$]/.test(src[j])) j++;
      out.push({ kind: 'word', text: src.slice(i, j) });
      i = j;
    } else if (/[0-9]/.test(c)) {
      let j = i + 1;
      while (j < src.length && /[\w.]/.test(src[j])) j++;
      out.push({ kind: 'other', text: 'number' });
      i = j;
    } else if (/\s/.test(c)) i++;
    else {
      if (c === '{') depth++;
      if (c === '}') {
        depth--;
        if (templates.length && templates[templates.length - 1] === depth) {
          templates.pop();
          i++;
          out.push({ kind: 'punct', text: ')' });
          templateText();
          continue;
        }
      }
      out.push({ kind: 'punct', text: c });
      i++;
    }
  }
  return out;
}

/** What may stand between `import`/`export` and `from` in an import or re-export. */
const CLAUSE = new Set(['{', '}', ',', '*']);

/** The module specifiers a source text imports or re-exports, in order. */
export function importsOf(src: string): string[] {
  const t = tokens(src);
  const found: string[] = [];
  for (let k = 0; k < t.length; k++) {
    const w = t[k];
    if (w.kind !== 'word' || (w.text !== 'import' && w.text !== 'export')) continue;
    if (k > 0 && t[k - 1].kind === 'punct' && t[k - 1].text === '.') continue; // import.meta, x.import
    const next = t[k + 1];
    if (!next) break;
    if (w.text === 'import' && next.kind === 'string') {
      found.push(next.text);
      continue;
    }
    if (w.text === 'import' && next.text === '(' && t[k + 2]?.kind === 'string') {
      found.push(t[k + 2].text);
      continue;
    }
    // import a, { b as c, type D } from '…'; import type X from '…'; export { a } from '…'; export * as n from '…'
    let j = k + 1;
    while (j < t.length && (t[j].kind === 'word' ? t[j].text !== 'from' : CLAUSE.has(t[j].text))) j++;
    if (t[j]?.kind === 'word' && t[j].text === 'from' && t[j + 1]?.kind === 'string') found.push(t[j + 1].text);
  }
  return found;
}

/** Every .ts, .mts and .mjs file below dir (absolute paths). */
export function sourceFiles(dir: string): string[] {
  const out: string[] = [];
  for (const e of readdirSync(dir, { withFileTypes: true })) {
    const p = join(dir, e.name);
    if (e.isDirectory()) out.push(...sourceFiles(p));
    else if (/\.(ts|mts|mjs)$/.test(e.name) && !e.name.endsWith('.d.ts')) out.push(p);
  }
  return out;
}

/** A relative import of `file`, as a path from `root` with forward slashes; null for a package. */
export function resolvedFrom(root: string, file: string, specifier: string): string | null {
  if (!specifier.startsWith('.')) return null;
  return relative(root, resolve(dirname(file), specifier)).split(sep).join('/');
}

export const readSource = (file: string) => readFileSync(file, 'utf8');
