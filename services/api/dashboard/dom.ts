/**
 * Browser-side helpers for building the page without string-built HTML: an element factory
 * that sets text (never markup), SVG insertion from the server's pictures, and formatting of
 * temperatures, times and grades as people read them.
 */
import { gradeMark, type Grade } from '../svg/fleet.ts';

type Child = Node | string | number | null | undefined | false;
type Attrs = Record<string, string | number | boolean | null | undefined | ((ev: Event) => void)>;

/** Creates an element; attributes starting with "on" are listeners; children are nodes or text. */
export function h(tag: string, attrs: Attrs = {}, ...children: Child[]): HTMLElement {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (typeof v === 'function') el.addEventListener(k.slice(2).toLowerCase(), v);
    else if (v === true) el.setAttribute(k, '');
    else el.setAttribute(k, String(v));
  }
  append(el, children);
  return el;
}

export function append(el: Element, children: Child[]): void {
  for (const c of children) {
    if (c === null || c === undefined || c === false) continue;
    el.append(typeof c === 'string' || typeof c === 'number' ? document.createTextNode(String(c)) : c);
  }
}

/** Parses SVG text from this server and returns it as a node ready to insert. */
export function svgNode(text: string): Element {
  const doc = new DOMParser().parseFromString(text, 'image/svg+xml');
  const root = doc.documentElement;
  if (root.nodeName !== 'svg') return h('p', { class: 'hint' }, 'The picture could not be read.');
  const node = document.importNode(root, true) as Element;
  // Scale to the container while keeping the drawn proportions.
  node.removeAttribute('width');
  node.removeAttribute('height');
  node.setAttribute('class', 'picture');
  return node;
}

/** The grade's shape (as in the server's pictures) and its word, for tables. */
export function gradeBadge(grade: Grade | null | undefined, extra = ''): HTMLElement {
  if (!grade) return h('span', { class: 'grade grade-none' }, extra || '—');
  const span = h('span', { class: `grade grade-${grade}`, 'data-grade': grade });
  const doc = new DOMParser().parseFromString(`<svg xmlns="http://www.w3.org/2000/svg" width="16" height="16" viewBox="0 0 16 16">${gradeMark(grade, 8, 8, 0.95)}</svg>`, 'image/svg+xml');
  span.append(document.importNode(doc.documentElement, true));
  span.append(document.createTextNode(' ' + grade + (extra ? ' ' + extra : '')));
  return span;
}

export type TempUnit = 'C' | 'F';

/** A temperature difference (spread, residual) in the unit's display unit. */
export function dT(degC: number | null | undefined, unit: TempUnit, digits = 1): string {
  if (degC === null || degC === undefined || !Number.isFinite(degC)) return '–';
  const v = unit === 'F' ? degC * 1.8 : degC;
  return `${v.toFixed(digits)} °${unit}`;
}

/** A signed temperature difference: "+3.2 °C". */
export function sdT(degC: number | null | undefined, unit: TempUnit, digits = 1): string {
  if (degC === null || degC === undefined || !Number.isFinite(degC)) return '–';
  return (degC > 0 ? '+' : degC < 0 ? '−' : '') + dT(Math.abs(degC), unit, digits);
}

/** An absolute temperature in the unit's display unit. */
export function T(degC: number | null | undefined, unit: TempUnit, digits = 1): string {
  if (degC === null || degC === undefined || !Number.isFinite(degC)) return '–';
  const v = unit === 'F' ? degC * 1.8 + 32 : degC;
  return `${v.toFixed(digits)} °${unit}`;
}

export function ago(tsIso: string | null | undefined, nowMs = Date.now()): string {
  if (!tsIso) return 'never';
  const s = Math.max(0, Math.round((nowMs - Date.parse(tsIso)) / 1000));
  if (s < 90) return `${s} s ago`;
  if (s < 90 * 60) return `${Math.round(s / 60)} min ago`;
  if (s < 36 * 3600) return `${Math.round(s / 3600)} h ago`;
  return `${Math.round(s / 86400)} d ago`;
}

/** "2026-03-01 10:04 UTC". */
export function when(tsIso: string | null | undefined): string {
  if (!tsIso) return '–';
  const d = new Date(tsIso);
  return Number.isFinite(d.getTime()) ? d.toISOString().slice(0, 16).replace('T', ' ') + ' UTC' : tsIso;
}

export function pct(fraction: number | null | undefined): string {
  return fraction === null || fraction === undefined || !Number.isFinite(fraction) ? '–' : `${Math.round(fraction * 100)} %`;
}

export function words(code: string): string {
  return code.replace(/_/g, ' ');
}
