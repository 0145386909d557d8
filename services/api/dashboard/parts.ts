/**
 * Pieces every dashboard page is built from: a titled panel, the box that shows the server's
 * refusal, a picture fetched with the key, a document opened in a new tab, a figure of a
 * definition list, and the unit as the pages read it. No page of its own.
 */
import { ApiError, getText, type Who } from './api.ts';
import { h, svgNode, type TempUnit } from './dom.ts';

/** What every page is given: who is looking, where to draw, the breadcrumbs, and how to draw itself again. */
export interface ViewContext {
  who: Who;
  root: HTMLElement;
  setCrumbs(items: Array<[string, string | null]>): void;
  /** Re-renders the current page (after an action). */
  refresh(): void;
}

export function panel(title: string, ...body: Array<Node | string | null>): HTMLElement {
  return h('section', { class: 'panel' }, h('h2', {}, title), ...body);
}

export function errorBox(err: unknown): HTMLElement {
  const msg = err instanceof ApiError ? `${err.message} (${err.status})` : (err as Error).message;
  return h('p', { class: 'error', role: 'alert' }, msg);
}

/** Loads a picture into a holder; the holder shows the server's sentence when it is refused. */
export async function picture(holder: HTMLElement, url: string): Promise<void> {
  try {
    holder.replaceChildren(svgNode(await getText(url)));
  } catch (err) {
    holder.replaceChildren(errorBox(err));
  }
}

/** Opens a document fetched with the key (the printable review, a picture) in a new tab. */
export async function openWithKey(url: string, type: string): Promise<void> {
  const win = window.open('', '_blank');
  try {
    const text = await getText(url, type);
    const blob = new Blob([text], { type });
    const href = URL.createObjectURL(blob);
    if (win) win.location.href = href;
    else window.location.href = href;
  } catch (err) {
    win?.close();
    alert((err as Error).message);
  }
}

export interface UnitInfo {
  id: string;
  name: string;
  site: string;
  temperatureUnit: TempUnit;
  ratedPowerMw: number;
  chambers: { count: number };
  thermocouples: { count: number };
  swirl: { sense: 1 | -1; curve: Array<[number, number]> };
}

/** A figure of a <dl>; a note (e.g. "above limit") is written after the value when cls is 'over'. */
export function figure(label: string, value: string, cls = '', note = ''): HTMLElement[] {
  return [h('dt', {}, label), h('dd', { class: cls }, value, cls === 'over' && note ? h('span', { class: 'note' }, ` ${note}`) : null)];
}
