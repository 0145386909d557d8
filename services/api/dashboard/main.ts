/**
 * Entry point of the dashboard in the browser: the key form, a hash router (#/ fleet board,
 * #/unit/ID, #/unit/ID/chamber/K, #/unit/ID/start/START_ID) and a gentle refresh every 30 seconds while the tab is
 * visible. The key lives in sessionStorage only; "Forget key" removes it.
 */
import { ApiError, getJson, storeKey, storedKey, type Who } from './api.ts';
import { h } from './dom.ts';
import { chamberView, fleetView, unitView } from './views.ts';
import type { ViewContext } from './parts.ts';
import { startView } from './starts.ts';

const REFRESH_MS = 30_000;

const view = document.getElementById('view') as HTMLElement;
const crumbs = document.getElementById('crumbs') as HTMLElement;
const form = document.getElementById('key-form') as HTMLFormElement;
const input = document.getElementById('key-input') as HTMLInputElement;
const whoEl = document.getElementById('who') as HTMLElement;
const forget = document.getElementById('forget-key') as HTMLButtonElement;

let who: Who | null = null;
let timer: number | undefined;
let rendering = false;
/** A render asked for while one was drawing (a link followed, a refresh): drawn when it ends. */
let again = false;

function setCrumbs(items: Array<[string, string | null]>): void {
  crumbs.replaceChildren(...items.flatMap(([label, href], i) => [i ? h('span', { class: 'sep', 'aria-hidden': 'true' }, '›') : null, href ? h('a', { href }, label) : h('span', { 'aria-current': 'page' }, label)].filter((x): x is HTMLElement => x !== null)));
}

function showKeyForm(message: string): void {
  who = null;
  form.hidden = false;
  whoEl.hidden = true;
  forget.hidden = true;
  crumbs.replaceChildren();
  view.replaceChildren(
    h('div', { class: 'welcome' },
      h('h1', {}, 'Exhaust-ring monitoring'),
      h('p', { class: 'notice', role: 'status', id: 'key-message' }, message),
      h('p', {}, 'Paste an API key in the box at the top. A viewer key shows the fleet board, the units, their chambers and thermocouples; an operator key can also acknowledge and shelve alerts. The key is kept only in this browser tab and is forgotten when the tab closes.'),
      h('p', {}, 'Keys are made by an administrator with ', h('code', {}, 'cansight keys create --role viewer'), '.'),
    ),
  );
  input.focus();
}

async function identify(): Promise<boolean> {
  if (!storedKey()) {
    showKeyForm('No key yet.');
    return false;
  }
  try {
    who = await getJson<Who>('/v1/whoami');
  } catch (err) {
    if (err instanceof ApiError && (err.status === 401 || err.status === 403)) {
      storeKey(null);
      showKeyForm(err.status === 401 ? `That key was refused: ${err.message}` : `That key cannot read the fleet: ${err.message}`);
      return false;
    }
    view.replaceChildren(h('p', { class: 'error', role: 'alert' }, `The server could not be reached: ${(err as Error).message}`));
    return false;
  }
  form.hidden = true;
  whoEl.hidden = false;
  forget.hidden = false;
  whoEl.textContent = `${who.role} key ${who.keyId}${who.units ? ' · units ' + who.units.join(', ') : ''}`;
  whoEl.dataset.role = who.role;
  return true;
}

async function render(): Promise<void> {
  if (rendering) {
    again = true;
    return;
  }
  rendering = true;
  again = false;
  try {
    if (!who && !(await identify())) return;
    const ctx: ViewContext = { who: who!, root: view, setCrumbs, refresh: () => void render() };
    const path = location.hash.replace(/^#/, '') || '/';
    const parts = path.split('/').filter(Boolean).map(decodeURIComponent);
    if (parts.length === 0) await fleetView(ctx);
    else if (parts[0] === 'unit' && parts.length === 2) await unitView(ctx, parts[1]);
    else if (parts[0] === 'unit' && parts.length === 4 && parts[2] === 'chamber' && /^\d+$/.test(parts[3])) await chamberView(ctx, parts[1], Number(parts[3]));
    else if (parts[0] === 'unit' && parts.length === 4 && parts[2] === 'start') await startView(ctx, parts[1], parts[3]);
    else {
      setCrumbs([['Fleet board', '#/'], ['Not found', null]]);
      view.replaceChildren(h('p', { class: 'error' }, `Nothing here: ${path}.`), h('p', {}, h('a', { href: '#/' }, 'Back to the fleet board')));
    }
    document.body.dataset.rendered = String(Date.now());
  } catch (err) {
    if (err instanceof ApiError && err.status === 401) {
      storeKey(null);
      showKeyForm(`The key was refused: ${err.message}`);
    } else {
      view.replaceChildren(h('p', { class: 'error', role: 'alert' }, (err as Error).message));
    }
  } finally {
    rendering = false;
    if (again) void render();
  }
}

function schedule(): void {
  window.clearInterval(timer);
  timer = window.setInterval(() => {
    // Do not redraw under a person typing a name or a reason.
    const typing = document.activeElement instanceof HTMLInputElement || document.activeElement instanceof HTMLSelectElement;
    if (document.visibilityState === 'visible' && who && !typing) void render();
  }, REFRESH_MS);
}

form.addEventListener('submit', (ev) => {
  ev.preventDefault();
  const key = input.value.trim();
  if (!key) return;
  storeKey(key);
  input.value = '';
  who = null;
  void render();
});

forget.addEventListener('click', () => {
  storeKey(null);
  showKeyForm('Key forgotten.');
});

window.addEventListener('hashchange', () => void render());
void render();
schedule();
