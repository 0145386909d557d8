/**
 * Three pages of the dashboard: the fleet board (units ranked by worst active alert, with
 * data freshness), a unit (ring plot, spread trend, chambers, thermocouples, active alerts with
 * acknowledge and shelve for operators, starts) and a chamber (residual trend, evidence, alert
 * history, and a swirl what-if: the stored rings re-mapped with another curve); a start's page is in starts.ts. Each view fills the element it is given and returns
 * nothing; errors go to the caller.
 */
import { getJson, postJson, storeName, storedName, type Alert, type ChamberRow, type FleetRow, type ThermocoupleRow, type Who } from './api.ts';
import { ago, dT, gradeBadge, h, pct, sdT, when, words, type TempUnit } from './dom.ts';
import { errorBox, figure, openWithKey, panel, picture, type UnitInfo, type ViewContext } from './parts.ts';
import { startsPanel } from './starts.ts';
import { ABOVE_LIMIT } from '../svg/draw.ts';

const FRESHNESS: Record<FleetRow['freshness'], string> = { live: 'live', late: 'late', silent: 'silent', no_data: 'no data yet' };
const DAY = 86_400_000;

function meter(value: number | null, limit: number | null): HTMLElement {
  const full = Math.max(limit !== null ? limit * 1.5 : 0, value !== null ? value * 1.05 : 0, 50);
  const bar = h('span', { class: 'meter', role: 'img', 'aria-label': 'spread against its limit' });
  if (value !== null) {
    const fill = h('span', { class: 'meter-fill' + (limit !== null && value > limit ? ' over' : '') });
    fill.style.width = `${Math.min(100, (Math.max(0, value) / full) * 100).toFixed(1)}%`;
    bar.append(fill);
  }
  if (limit !== null) {
    const tick = h('span', { class: 'meter-limit' });
    tick.style.left = `${Math.min(100, (limit / full) * 100).toFixed(1)}%`;
    bar.append(tick);
  }
  return bar;
}

// ---------------------------------------------------------------- fleet board

export async function fleetView(ctx: ViewContext): Promise<void> {
  ctx.setCrumbs([['Fleet board', null]]);
  const data = await getJson<{ asOf: string; units: FleetRow[] }>('/v1/fleet');
  const rows = data.units;
  const counts = { alarmOrWorse: 0, silent: 0 };
  for (const r of rows) {
    if (r.worstGrade === 'alarm' || r.worstGrade === 'critical') counts.alarmOrWorse++;
    if (r.freshness === 'silent') counts.silent++;
  }
  const table = h(
    'table',
    { class: 'board', id: 'fleet-board' },
    h('caption', {}, 'Units ranked by their worst active alert, then by exhaust spread as a share of its limit.'),
    h(
      'thead',
      {},
      h('tr', {}, h('th', { scope: 'col' }, 'Worst active alert'), h('th', { scope: 'col' }, 'Unit'), h('th', { scope: 'col' }, 'Exhaust spread / limit'), h('th', { scope: 'col' }, 'Corrected load'), h('th', { scope: 'col' }, 'Coverage'), h('th', { scope: 'col' }, 'Last ring'), h('th', { scope: 'col' }, 'Alerts')),
    ),
  );
  const body = h('tbody');
  for (const r of rows) {
    const u = r.temperatureUnit;
    const href = `#/unit/${encodeURIComponent(r.unitId)}`;
    body.append(
      h(
        'tr',
        { class: `row-${r.freshness}`, 'data-unit': r.unitId, 'data-grade': r.worstGrade ?? 'none' },
        h('td', {}, gradeBadge(r.worstGrade, r.worstGrade ? '' : 'none active')),
        h('td', {}, h('a', { href, class: 'unit-link' }, r.name), h('div', { class: 'sub' }, `${r.unitId} · ${r.site}`)),
        h('td', {}, h('div', {}, `${dT(r.spreadC, u)} / ${dT(r.spreadLimitC, u)}`), meter(r.spreadC, r.spreadLimitC)),
        h('td', {}, pct(r.loadFraction)),
        h('td', {}, r.coverage ? `${r.coverage.valid} of ${r.coverage.total} valid` : '–'),
        h('td', { class: 'freshness' }, h('span', { class: `fresh fresh-${r.freshness}` }, FRESHNESS[r.freshness]), h('div', { class: 'sub' }, ago(r.lastRingTs))),
        h('td', {}, `${r.activeAlerts} active`, h('div', { class: 'sub' }, `${r.unacknowledged} not acknowledged${r.shelvedAlerts ? ` · ${r.shelvedAlerts} shelved` : ''}`)),
      ),
    );
  }
  if (rows.length === 0) body.append(h('tr', {}, h('td', { colspan: 7 }, 'No units in this key\u2019s scope.')));
  table.append(body);
  ctx.root.replaceChildren(
    h('div', { class: 'pagehead' }, h('h1', {}, 'Fleet board'), h('p', { class: 'sub' }, `${rows.length} units · ${counts.alarmOrWorse} at alarm or worse · ${counts.silent} silent · refreshed ${when(data.asOf)}`)),
    table,
    h('p', { class: 'actions' }, h('button', { type: 'button', class: 'quiet', onclick: () => void openWithKey('/v1/fleet.svg', 'image/svg+xml') }, 'Fleet picture for printing (SVG)')),
  );
}

// ---------------------------------------------------------------- unit page

interface Status {
  ts: string | null;
  lastRingTs: string | null;
  /** What is not judged yet and why (no baseline, drift not computed…). */
  notJudged?: Array<{ part: string; reason: string }>;
  /** How far the analysis has come with the rings stored. */
  progress?: {
    ringsStored: number;
    ringsAnalysed: number;
    ringsPending: number;
    watermarkTs: string | null;
    reanalysis?: { fromTs: string | null; toTs: string | null; ringsLeft: number; askedFromTs: string | null } | null;
  };
  loadFraction?: number | null;
  swirlDeg?: number | null;
  spread?: number | null;
  spreadExcl1?: number | null;
  spreadExcl2?: number | null;
  limit?: number | null;
  coldestThermocouple?: number | null;
  hottestThermocouple?: number | null;
  [k: string]: unknown;
}

/**
 * A unit whose analysis is behind its stored rings (a history import, a gateway catching up):
 * a progress bar with the rings analysed of those stored and the ring time reached; nothing
 * once it has caught up.
 */
function catchingUp(s: Status, unitId: string): HTMLElement[] {
  const p = s.progress;
  const again = p?.reanalysis;
  if (p && again && (again.toTs || again.askedFromTs)) {
    // Rings judged again after a baseline or configuration change that takes effect in the past.
    const from = again.fromTs ?? again.askedFromTs;
    const span = again.fromTs && again.toTs ? Date.parse(again.toTs) - Date.parse(again.fromTs) : 0;
    const done = span > 0 && p.watermarkTs ? Math.max(0, Math.min(span, Date.parse(p.watermarkTs) - Date.parse(again.fromTs as string))) : 0;
    const share = span > 0 ? Math.floor((done / span) * 100) : 0;
    return [
      h(
        'div',
        { class: 'catching-up', id: 'catching-up' },
        h('strong', {}, 'Judging the history again. '),
        h('progress', { max: '100', value: String(share), 'aria-label': `re-analysis of ${unitId}: ${share} %` }),
        h('p', {}, `A baseline or configuration version takes effect at ${from ? when(from) : 'an earlier time'}: the rings after it are judged again (${share} % of the ring time${again.toTs ? ` up to ${when(again.toTs)}` : ''}, ${again.ringsLeft.toLocaleString('en-GB')} rings left). Alerts, trends and drift from then on change as it goes.`),
      ),
    ];
  }
  if (!p || p.ringsPending <= 0 || p.ringsStored <= 0) return [];
  const analysed = Math.min(p.ringsAnalysed, p.ringsStored);
  const share = Math.floor((analysed / p.ringsStored) * 100);
  return [
    h(
      'div',
      { class: 'catching-up', id: 'catching-up' },
      h('strong', {}, 'Catching up. '),
      h('progress', { max: String(p.ringsStored), value: String(analysed), 'aria-label': `analysis of ${unitId}: ${share} %` }),
      h('p', {}, `${analysed.toLocaleString('en-GB')} of ${p.ringsStored.toLocaleString('en-GB')} rings analysed (${share} %), ${p.ringsPending.toLocaleString('en-GB')} left${p.watermarkTs ? `; analysed up to ${when(p.watermarkTs)}` : ''}. Alerts, trends and drift fill in as the analysis goes on.`),
    ),
  ];
}

/** Reads a figure that may be named with or without a unit suffix. */
function fig(s: Status, ...names: string[]): number | null {
  for (const n of names) {
    const v = s[n];
    if (typeof v === 'number' && Number.isFinite(v)) return v;
  }
  return null;
}

export async function unitView(ctx: ViewContext, unitId: string): Promise<void> {
  const enc = encodeURIComponent(unitId);
  const [unit, status] = await Promise.all([
    getJson<UnitInfo>(`/v1/units/${enc}`),
    getJson<Status>(`/v1/units/${enc}/status`).catch(() => null),
  ]);
  const u = unit.temperatureUnit;
  ctx.setCrumbs([['Fleet board', '#/'], [unit.name, null]]);
  const s: Status = status ?? { ts: null, lastRingTs: null };
  const spread = fig(s, 'spread', 'spreadC', 'spreadDegC');
  const limit = fig(s, 'limit', 'limitC', 'spreadLimitC', 'limitDegC');
  const figures = h(
    'dl',
    { class: 'figures' },
    ...figure('Exhaust spread', dT(spread, u), limit !== null && spread !== null && spread > limit ? 'over' : '', ABOVE_LIMIT),
    ...figure('Spread limit', dT(limit, u)),
    ...figure('Spread less coldest', dT(fig(s, 'spreadExcl1', 'spreadExcl1C', 'spreadExcl1DegC'), u)),
    ...figure('Spread less two coldest', dT(fig(s, 'spreadExcl2', 'spreadExcl2C', 'spreadExcl2DegC'), u)),
    ...figure('Corrected load', pct(fig(s, 'loadFraction', 'correctedLoad'))),
    ...figure('Swirl', fig(s, 'swirlDeg') === null ? '–' : `${Math.round(fig(s, 'swirlDeg')!)}°`),
    ...figure('Latest analysed ring', when(s.ts)),
    ...figure('Latest ring stored', `${when(s.lastRingTs)} (${ago(s.lastRingTs)})`),
  );

  const ring = h('div', { class: 'picture-holder', id: 'ring-plot' }, h('p', { class: 'hint' }, 'Drawing the ring…'));
  const spreadTrend = h('div', { class: 'picture-holder', id: 'spread-trend' }, h('p', { class: 'hint' }, 'Drawing the spread trend…'));
  const alertsBox = h('div', { id: 'unit-alerts' }, h('p', { class: 'hint' }, 'Loading alerts…'));
  const chambersBox = h('div', { id: 'chamber-table' }, h('p', { class: 'hint' }, 'Loading chambers…'));
  const tcBox = h('div', { id: 'thermocouple-table' }, h('p', { class: 'hint' }, 'Loading thermocouples…'));
  const startsBox = h('div', { id: 'unit-starts' }, h('p', { class: 'hint' }, 'Loading starts…'));

  ctx.root.replaceChildren(
    h(
      'div',
      { class: 'pagehead' },
      h('h1', {}, unit.name),
      h('p', { class: 'sub' }, `${unit.id} · ${unit.site} · ${unit.chambers.count} chambers · ${unit.thermocouples.count} exhaust thermocouples · rated ${unit.ratedPowerMw} MW (ISO)`),
      h('p', { class: 'actions' }, h('button', { type: 'button', onclick: () => void openWithKey(`/v1/units/${enc}/review`, 'text/html') }, 'Pre-outage review (printable)'), ' ', h('button', { type: 'button', class: 'quiet', onclick: () => void openWithKey(`/v1/units/${enc}/review?format=csv`, 'text/csv') }, 'Review as CSV')),
    ),
    figures,
    ...catchingUp(s, unit.id),
    ...(s.notJudged?.length ? [h('div', { class: 'not-judged', id: 'not-judged' }, h('strong', {}, 'Not judged yet. '), ...s.notJudged.map((x) => h('p', {}, x.reason)))] : []),
    h('div', { class: 'two' }, panel('Exhaust ring now', ring), panel('Active alerts', alertsBox)),
    panel('Exhaust spread (the 7 days up to the last ring)', spreadTrend),
    panel('Chambers', chambersBox),
    panel('Thermocouples', tcBox),
    panel('Starts (the 90 days up to the last ring)', startsBox),
  );

  await Promise.all([
    picture(ring, `/v1/units/${enc}/ring.svg`),
    picture(spreadTrend, `/v1/units/${enc}/spread.svg`),
    alertsPanel(ctx, alertsBox, unitId, null),
    chamberTable(chambersBox, unitId, u),
    thermocoupleTable(tcBox, unitId, u),
    startsPanel(startsBox, unitId, u),
  ]);
}

function tone(v: number | null): string | null {
  return v === null ? null : v < 0 ? 'cold' : 'hot';
}

async function chamberTable(box: HTMLElement, unitId: string, u: TempUnit): Promise<void> {
  try {
    const data = await getJson<{ chambers: ChamberRow[]; baselineVersion: number | null }>(`/v1/units/${encodeURIComponent(unitId)}/chambers`);
    const t = h(
      'table',
      { class: 'grid' },
      h('thead', {}, h('tr', {}, ...['Chamber', 'Deviation now (± 1σ)', 'Residual now', 'Drift per 30 days (95 % interval)', 'CUSUM', 'Baseline', 'Active alert'].map((x) => h('th', { scope: 'col' }, x)))),
    );
    const body = h('tbody');
    for (const c of data.chambers) {
      const iv = c.driftIntervalCPer30d;
      body.append(
        h(
          'tr',
          { 'data-chamber': c.chamber },
          h('td', {}, h('a', { href: `#/unit/${encodeURIComponent(unitId)}/chamber/${c.chamber}` }, `chamber ${c.chamber}`)),
          h('td', { class: tone(c.deviationC), title: c.notObservableReason ?? '' }, c.observable === false ? 'not observable' : `${sdT(c.deviationC, u)}${c.deviationC !== null && c.uncertaintyC !== null ? ` ± ${dT(c.uncertaintyC, u)}` : ''}`),
          h('td', { class: tone(c.residualC) }, sdT(c.residualC, u)),
          h('td', {}, `${sdT(c.driftCPer30d, u, 2)}${iv ? ` (${sdT(iv[0], u, 2)} to ${sdT(iv[1], u, 2)})` : ''}`),
          h('td', {}, c.cusum ? (c.cusum.signal ? `signal: ${c.cusum.signal === 'down' ? 'colder' : 'hotter'}` : 'in control') : '–'),
          h('td', {}, c.baselineVersion !== null ? `v${c.baselineVersion}` : 'none yet'),
          h('td', {}, gradeBadge(c.activeGrade)),
        ),
      );
    }
    t.append(body);
    box.replaceChildren(t, h('p', { class: 'sub' }, `Deviation: the chamber estimate against the average chamber in the latest ring. Residual: against the chamber's own baseline at the same corrected load${data.baselineVersion === null ? ' (no baseline fitted yet, so no residual or drift)' : ''}.`));
  } catch (err) {
    box.replaceChildren(errorBox(err));
  }
}

async function thermocoupleTable(box: HTMLElement, unitId: string, u: TempUnit): Promise<void> {
  try {
    const data = await getJson<{ thermocouples: ThermocoupleRow[] }>(`/v1/units/${encodeURIComponent(unitId)}/thermocouples`);
    const t = h('table', { class: 'grid compact' }, h('thead', {}, h('tr', {}, ...['TC', 'Angle', 'Chamber behind', 'Now', 'Residual', 'Drift per 30 days', 'Invalid share', 'Verdict'].map((x) => h('th', { scope: 'col' }, x)))));
    const body = h('tbody');
    for (const r of data.thermocouples) {
      body.append(
        h(
          'tr',
          { 'data-thermocouple': r.thermocouple, class: r.valid ? '' : 'invalid' },
          h('td', {}, String(r.thermocouple)),
          h('td', {}, `${r.angleDeg.toFixed(0)}°`),
          h('td', {}, r.chamberBehind ? String(r.chamberBehind) : '–'),
          h('td', {}, r.valid ? 'valid' : `not used: ${words(r.reason ?? 'invalid')}`),
          h('td', {}, sdT(r.residualC, u)),
          h('td', {}, sdT(r.driftCPer30d, u, 2)),
          h('td', {}, pct(r.invalidShare)),
          h('td', {}, r.replace ? h('strong', {}, 'check / replace') : 'keep'),
        ),
      );
    }
    t.append(body);
    box.replaceChildren(t);
  } catch (err) {
    box.replaceChildren(errorBox(err));
  }
}

// ---------------------------------------------------------------- alerts with actions

async function alertsPanel(ctx: ViewContext, box: HTMLElement, unitId: string, chamber: number | null): Promise<void> {
  try {
    const data = await getJson<{ alerts: Alert[] }>(`/v1/alerts?unitId=${encodeURIComponent(unitId)}&state=active`);
    const alerts = data.alerts.filter((a) => chamber === null || a.chamber === chamber);
    const list = h('ul', { class: 'alerts' });
    if (alerts.length === 0) list.append(h('li', { class: 'quiet' }, 'No active alert.'));
    const nameInput = h('input', { type: 'text', id: 'actor-name', value: storedName(), placeholder: 'your name', maxlength: 80 }) as HTMLInputElement;
    nameInput.addEventListener('change', () => storeName(nameInput.value.trim()));
    for (const a of alerts) list.append(alertItem(ctx, a, nameInput));
    const parts: Node[] = [];
    if (ctx.who.canAct && alerts.length) parts.push(h('p', { class: 'actor' }, h('label', { for: 'actor-name' }, 'Acting as '), nameInput));
    else if (!ctx.who.canAct) parts.push(h('p', { class: 'sub' }, 'This key can read only: acknowledging and shelving need an operator key.'));
    box.replaceChildren(...parts, list);
  } catch (err) {
    box.replaceChildren(errorBox(err));
  }
}

function subject(a: Alert): string {
  if (a.chamber !== null) return `chamber ${a.chamber}`;
  if (a.thermocouple !== null) return `thermocouple ${a.thermocouple}`;
  return 'unit';
}

function alertItem(ctx: ViewContext, a: Alert, nameInput: HTMLInputElement): HTMLElement {
  const state = [a.active ? 'active' : 'returned to normal', a.acknowledged ? 'acknowledged' : 'not acknowledged', a.shelvedUntil ? `shelved until ${when(a.shelvedUntil)}` : ''].filter(Boolean).join(' · ');
  const li = h(
    'li',
    { class: `alert grade-${a.grade}${a.acknowledged ? ' acked' : ''}`, 'data-alert': a.id },
    h('div', { class: 'alert-head' }, gradeBadge(a.grade), h('strong', {}, ` ${words(a.kind)} · ${subject(a)}`)),
    h('p', {}, a.message),
    h('p', { class: 'advice' }, a.advice),
    h('p', { class: 'sub' }, `raised ${when(a.raisedAt)} · ${state}`),
  );
  if (ctx.who.canAct) {
    const msg = h('span', { class: 'action-msg', role: 'status' });
    const by = () => {
      const name = nameInput.value.trim();
      if (!name) {
        msg.textContent = 'Write your name first: it is recorded with the action.';
        nameInput.focus();
        return null;
      }
      storeName(name);
      return name;
    };
    const act = async (url: string, body: Record<string, unknown>) => {
      try {
        await postJson(url, body);
        ctx.refresh();
      } catch (err) {
        msg.textContent = (err as Error).message;
      }
    };
    const ack = h('button', { type: 'button', class: 'ack', disabled: a.acknowledged, onclick: () => {
      const name = by();
      if (name) void act(`/v1/alerts/${a.id}/ack`, { by: name });
    } }, a.acknowledged ? 'Acknowledged' : 'Acknowledge');
    const hours = h('select', { 'aria-label': 'shelve for' }, ...[1, 8, 24, 72].map((n) => h('option', { value: n }, `${n} h`))) as HTMLSelectElement;
    const reason = h('input', { type: 'text', placeholder: 'reason for shelving', maxlength: 200, 'aria-label': 'reason for shelving' }) as HTMLInputElement;
    const shelve = h('button', { type: 'button', class: 'shelve', onclick: () => {
      const name = by();
      if (!name) return;
      if (!reason.value.trim()) {
        msg.textContent = 'Give a reason: a shelved alert is hidden from the board until the shelf expires.';
        reason.focus();
        return;
      }
      void act(`/v1/alerts/${a.id}/shelve`, { by: name, until: new Date(Date.now() + Number(hours.value) * 3_600_000).toISOString(), reason: reason.value.trim() });
    } }, 'Shelve');
    const unshelve = a.shelvedUntil ? h('button', { type: 'button', class: 'quiet', onclick: () => {
      const name = by();
      if (name) void act(`/v1/alerts/${a.id}/unshelve`, { by: name });
    } }, 'Unshelve') : null;
    li.append(h('div', { class: 'alert-actions' }, ack, ' ', a.shelvedUntil ? unshelve : h('span', {}, hours, reason, shelve), msg));
  }
  return li;
}

// ---------------------------------------------------------------- chamber page

export async function chamberView(ctx: ViewContext, unitId: string, chamber: number): Promise<void> {
  const enc = encodeURIComponent(unitId);
  const unit = await getJson<UnitInfo>(`/v1/units/${enc}`);
  const u = unit.temperatureUnit;
  ctx.setCrumbs([['Fleet board', '#/'], [unit.name, `#/unit/${enc}`], [`Chamber ${chamber}`, null]]);
  const trend = h('div', { class: 'picture-holder', id: 'chamber-trend' }, h('p', { class: 'hint' }, 'Drawing the trend…'));
  const evidence = h('div', { id: 'chamber-evidence' }, h('p', { class: 'hint' }, 'Loading…'));
  const active = h('div', {}, h('p', { class: 'hint' }, 'Loading…'));
  const history = h('div', { id: 'chamber-history' }, h('p', { class: 'hint' }, 'Loading…'));
  const whatIf = whatIfPanel(unit, chamber);
  const span = h('select', { 'aria-label': 'trend window', id: 'trend-window' }, ...[[30, '30 days'], [90, '90 days'], [365, 'one year']].map(([d, l]) => h('option', { value: d }, String(l)))) as HTMLSelectElement;
  span.value = '90';
  const draw = () => {
    const now = Date.now();
    // 90 days is the server's default, which starts at the unit's first data when that is later.
    const days = Number(span.value);
    void picture(trend, days === 90 ? `/v1/units/${enc}/chambers/${chamber}/trend.svg` : `/v1/units/${enc}/chambers/${chamber}/trend.svg?from=${new Date(now - days * DAY).toISOString()}&to=${new Date(now).toISOString()}`);
  };
  span.addEventListener('change', draw);
  ctx.root.replaceChildren(
    h('div', { class: 'pagehead' }, h('h1', {}, `${unit.name} · chamber ${chamber}`), h('p', { class: 'sub' }, 'Residual: against the chamber\u2019s own baseline at the same corrected load, common-mode movement removed. Before a baseline is fitted the trend shows the deviation from the average chamber.')),
    panel('Residual trend', h('p', { class: 'actions' }, h('label', {}, 'Window ', span)), trend),
    h('div', { class: 'two' }, panel('Evidence', evidence), panel('Active alerts on this chamber', active)),
    panel('Alert history', history),
    panel('Swirl what-if', whatIf),
  );
  draw();
  await Promise.all([
    (async () => {
      try {
        const data = await getJson<{ chambers: ChamberRow[] }>(`/v1/units/${enc}/chambers`);
        const c = data.chambers.find((x) => x.chamber === chamber);
        if (!c) throw new Error(`This unit has no chamber ${chamber}.`);
        const iv = c.driftIntervalCPer30d;
        evidence.replaceChildren(
          h(
            'dl',
            { class: 'figures narrow' },
            ...figure('Chamber angle', `${c.angleDeg.toFixed(0)}°`),
            ...figure('Plume on the ring now (after swirl)', c.plumeAngleDeg === null ? '–' : `${c.plumeAngleDeg.toFixed(0)}°`),
            ...figure('Deviation now (from the average chamber)', c.observable === false ? (c.notObservableReason ?? 'not observable') : `${sdT(c.deviationC, u)}${c.deviationC !== null && c.uncertaintyC !== null ? ` ± ${dT(c.uncertaintyC, u)}` : ''}`),
            ...figure('Residual now (against its baseline)', sdT(c.residualC, u)),
            ...figure('Drift per 30 days', sdT(c.driftCPer30d, u, 2)),
            ...figure('95 % interval', iv ? `${sdT(iv[0], u, 2)} to ${sdT(iv[1], u, 2)}` : '–'),
            ...figure('Drift per 1000 fired hours', sdT(c.driftCPer1000h, u, 2)),
            ...figure('CUSUM', c.cusum ? `${c.cusum.signal ? 'signal ' + (c.cusum.signal === 'down' ? '(colder)' : '(hotter)') : 'in control'} · upper ${c.cusum.upper.toFixed(2)}, lower ${c.cusum.lower.toFixed(2)}` : '–'),
            ...figure('Baseline', c.baselineVersion !== null ? `version ${c.baselineVersion}` : 'none fitted yet'),
          ),
        );
      } catch (err) {
        evidence.replaceChildren(errorBox(err));
      }
    })(),
    alertsPanel(ctx, active, unitId, chamber),
    (async () => {
      try {
        const data = await getJson<{ alerts: Alert[] }>(`/v1/alerts?unitId=${enc}&state=all`);
        const mine = data.alerts.filter((a) => a.chamber === chamber);
        const t = h('table', { class: 'grid' }, h('thead', {}, h('tr', {}, ...['Raised', 'Kind', 'Grade', 'State', 'Message'].map((x) => h('th', { scope: 'col' }, x)))));
        const body = h('tbody');
        for (const a of mine) {
          body.append(h('tr', {}, h('td', {}, when(a.raisedAt)), h('td', {}, words(a.kind)), h('td', {}, gradeBadge(a.grade)), h('td', {}, a.active ? 'active' : `returned to normal ${when(a.clearedAt)}`), h('td', {}, a.message)));
        }
        if (mine.length === 0) body.append(h('tr', {}, h('td', { colspan: 5 }, 'No alert on this chamber in the stored history.')));
        t.append(body);
        history.replaceChildren(t);
      } catch (err) {
        history.replaceChildren(errorBox(err));
      }
    })(),
  ]);
}

interface WhatIfChamber { chamber: number; deviationC: number | null; residualC: number | null; rank: number | null; sensitivityCPerDeg: number | null }
interface WhatIfOutcome { coldestChamber: number | null; ringsUsed: number; chambers: WhatIfChamber[] }
interface WhatIfReply { ringsInWindow: number; reference: { baselineVersion: number } | null; current: WhatIfOutcome; candidate: WhatIfOutcome; callMoves: boolean; advice: string }

/**
 * The swirl what-if of the chamber page: a candidate curve (the configured one to start with,
 * as "load %: degrees" pairs) and a window of days up to the latest analysed ring; the stored
 * rings are re-mapped on the server and the two rankings shown side by side, this chamber's row
 * marked. Nothing is stored.
 */
function whatIfPanel(unit: UnitInfo, chamber: number): HTMLElement {
  const u = unit.temperatureUnit;
  const enc = encodeURIComponent(unit.id);
  const curveText = (c: Array<[number, number]>) => c.map(([l, d]) => `${Math.round(l * 100)}: ${d}`).join(', ');
  const curve = h('input', { id: 'what-if-curve', 'aria-label': 'candidate swirl curve', value: curveText(unit.swirl.curve), size: 40 }) as HTMLInputElement;
  const days = h('select', { id: 'what-if-days', 'aria-label': 'what-if window' }, ...[[1, 'last day'], [7, 'last 7 days'], [31, 'last 31 days']].map(([d, l]) => h('option', { value: d }, String(l)))) as HTMLSelectElement;
  days.value = '7';
  const run = h('button', { type: 'button', id: 'what-if-run' }, 'Re-map the rings') as HTMLButtonElement;
  const out = h('div', { id: 'what-if-result' }, h('p', { class: 'hint' }, `Give a candidate curve as corrected load %: swirl degrees pairs (the configured one is filled in), and see whether chamber ${chamber}'s standing depends on it. Nothing is stored.`));
  run.addEventListener('click', async () => {
    const pairs = curve.value.split(',').map((p) => p.split(':').map((x) => Number(x.trim())));
    if (pairs.some((p) => p.length !== 2 || !p.every(Number.isFinite))) {
      out.replaceChildren(h('p', { class: 'error' }, 'Write the curve as load %: degrees pairs separated by commas, e.g. 30: 92, 60: 74, 100: 55.'));
      return;
    }
    run.disabled = true;
    out.replaceChildren(h('p', { class: 'hint' }, 'Re-mapping the stored rings…'));
    try {
      const status = await getJson<{ ts: string | null }>(`/v1/units/${enc}/status`);
      const to = status.ts ? Date.parse(status.ts) + 1000 : Date.now();
      const body = { curve: pairs.map(([l, d]) => [l / 100, d]), from: new Date(to - Number(days.value) * DAY).toISOString(), to: new Date(to).toISOString() };
      const r = await postJson<WhatIfReply>(`/v1/units/${enc}/swirl/what-if`, body);
      const by = r.reference ? 'Residual' : 'Deviation';
      const val = (c: WhatIfChamber) => sdT(r.reference ? c.residualC : c.deviationC, u);
      const t = h('table', { class: 'grid' }, h('thead', {}, h('tr', {}, ...['Chamber', 'Rank now', `${by} now`, 'Rank with candidate', `${by.toLowerCase()} with candidate`.replace(/^./, (x) => x.toUpperCase()), 'Moves per degree of swirl'].map((x) => h('th', { scope: 'col' }, x)))));
      const tb = h('tbody');
      r.current.chambers.forEach((c, k) => {
        const d = r.candidate.chambers[k];
        tb.append(h('tr', { 'data-chamber': c.chamber, class: c.chamber === chamber ? 'this' : '' }, h('td', {}, `chamber ${c.chamber}`), h('td', {}, String(c.rank ?? '–')), h('td', {}, val(c)), h('td', {}, String(d.rank ?? '–')), h('td', {}, val(d)), h('td', {}, c.sensitivityCPerDeg === null ? '–' : `${sdT(c.sensitivityCPerDeg, u, 2)}/°`)));
      });
      t.append(tb);
      out.replaceChildren(h('p', { class: r.callMoves ? 'over' : '' }, r.advice), t, h('p', { class: 'sub' }, `${r.current.ringsUsed} steady rings of ${r.ringsInWindow} re-mapped; ${r.reference ? `residuals against the baseline version ${r.reference.baselineVersion} reference window, mapped with the same curve` : 'no baseline yet: ranked by the deviation from the average chamber'}.`));
    } catch (err) {
      out.replaceChildren(errorBox(err));
    } finally {
      run.disabled = false;
    }
  });
  return h('div', {}, h('p', { class: 'actions' }, h('label', {}, 'Curve ', curve), ' ', h('label', {}, 'Window ', days), ' ', run), out);
}
