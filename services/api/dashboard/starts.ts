/**
 * The starts of a unit on the dashboard: the unit page's panel (the start counters, the
 * start-by-start trend of crossfire time and spread at full speed no load, and the recent
 * starts with outcome, phase timeline and crossfire time) and a start's own page (its picture,
 * phases, per-chamber lighting and findings, with the caution the API gives). Everything comes
 * from the /v1/units/:unitId/starts routes; nothing here judges a start.
 */
import { getJson, type StartDetail, type StartList, type StartSummary } from './api.ts';
import { dT, gradeBadge, h, pct, when, words, type TempUnit } from './dom.ts';
import { errorBox, figure, panel, picture, type UnitInfo } from './parts.ts';
import type { ViewContext } from './parts.ts';

/** Starts listed on the unit page (the trend shows every start of the window). */
const LISTED = 12;

const OUTCOME: Record<string, string> = {
  completed: 'completed',
  tripped_from_load: 'completed, later tripped from load',
  failed_to_fire: 'failed to fire',
  flame_lost_in_warmup: 'flame lost in warm-up',
  aborted: 'aborted',
};

const startHref = (unitId: string, startId: string) => `#/unit/${encodeURIComponent(unitId)}/start/${encodeURIComponent(startId)}`;

function seconds(s: number | null | undefined): string {
  if (s === null || s === undefined || !Number.isFinite(s)) return '–';
  if (s < 90) return `${s.toFixed(s < 10 ? 1 : 0)} s`;
  return `${Math.floor(s / 60)} min ${String(Math.round(s % 60)).padStart(2, '0')} s`;
}

function outcomeText(s: StartSummary): string {
  const o = OUTCOME[s.outcome] ?? words(s.outcome);
  return s.stoppedIn && s.outcome !== 'completed' && s.outcome !== 'tripped_from_load' ? `${o} in ${words(s.stoppedIn)}` : o;
}

/** A start's phases as a bar, each phase as wide as it lasted, named in its title and the label. */
export function timeline(s: StartSummary): HTMLElement {
  const endMs = Date.parse(s.endAt);
  const parts = s.phases.map((p, i) => {
    const next = i + 1 < s.phases.length ? Date.parse(s.phases[i + 1].startAt) : endMs;
    const dur = p.durationS ?? Math.max(0, (next - Date.parse(p.startAt)) / 1000);
    return { phase: p.phase, dur };
  });
  const total = parts.reduce((a, p) => a + p.dur, 0) || 1;
  const label = parts.map((p) => `${words(p.phase)} ${seconds(p.dur)}`).join(', ');
  const bar = h('span', { class: 'timeline', role: 'img', 'aria-label': `phases: ${label}` });
  parts.forEach((p, i) => {
    const seg = h('span', { class: `ph ph-${i % 2 ? 'b' : 'a'}`, 'data-phase': p.phase, title: `${words(p.phase)}: ${seconds(p.dur)}` });
    seg.style.width = `${Math.max(0.6, (100 * p.dur) / total).toFixed(2)}%`;
    bar.append(seg);
  });
  const last = s.phases[s.phases.length - 1];
  return h('div', {}, bar, h('div', { class: 'sub' }, last ? `${s.phases.length} phases to ${words(last.phase)} in ${seconds(total)}` : 'no phase'));
}

/** The unit page's starts panel: counters, the start-by-start trend and the recent starts. */
export async function startsPanel(box: HTMLElement, unitId: string, u: TempUnit): Promise<void> {
  const enc = encodeURIComponent(unitId);
  try {
    const data = await getJson<StartList>(`/v1/units/${enc}/starts`);
    const c = data.counters;
    const head = h('p', { class: 'sub', id: 'start-counters' }, `${c.firedStarts} fired starts · ${c.failedStarts} failed · ${c.trips} trips · ${Math.round(c.firedHours)} fired hours · ${data.starts.length} starts cranked since ${when(data.from)}`);
    if (data.starts.length === 0) {
      box.replaceChildren(head, h('p', { class: 'hint' }, 'No start in the 90 days up to the last ring: the unit has been running, or stopped, throughout.'));
      return;
    }
    const trend = h('div', { class: 'picture-holder', id: 'starts-trend' }, h('p', { class: 'hint' }, 'Drawing the start trend…'));
    const t = h('table', { class: 'grid', id: 'start-table' }, h('thead', {}, h('tr', {}, ...['Cranked', 'Outcome', 'Phase timeline', 'Crossfire', 'Spread end of warm-up', 'Spread at full speed no load', 'Chambers'].map((x) => h('th', { scope: 'col' }, x)))));
    const body = h('tbody');
    for (const s of data.starts.slice(0, LISTED)) {
      const bad = s.outcome !== 'completed' && s.outcome !== 'tripped_from_load';
      body.append(
        h(
          'tr',
          { 'data-start': s.startId, 'data-outcome': s.outcome, class: bad ? 'start-failed' : '' },
          h('td', {}, h('a', { href: startHref(unitId, s.startId), class: 'start-link' }, when(s.crankAt))),
          h('td', {}, bad ? h('strong', {}, outcomeText(s)) : outcomeText(s)),
          h('td', {}, timeline(s)),
          h('td', {}, s.crossfireCompleteS === null ? 'not complete' : `${s.crossfireCompleteS.toFixed(1)} s`),
          h('td', {}, dT(s.spreadEndOfWarmupC, u)),
          h('td', {}, dT(s.spreadFsnlC, u)),
          h('td', {}, s.unlitChambers.length ? h('strong', {}, `unlit: ${s.unlitChambers.join(', ')}`) : s.findingKinds.includes('chamber_unlit') ? h('strong', {}, 'one lit late') : 'all lit'),
        ),
      );
    }
    t.append(body);
    const more = data.starts.length > LISTED ? h('p', { class: 'sub' }, `The ${LISTED} newest of ${data.starts.length}; the trend above shows them all.`) : null;
    box.replaceChildren(head, trend, t, more ?? '');
    await picture(trend, `/v1/units/${enc}/starts/trend.svg`);
  } catch (err) {
    box.replaceChildren(errorBox(err));
  }
}

/** A start's own page: #/unit/ID/start/START_ID. */
export async function startView(ctx: ViewContext, unitId: string, startId: string): Promise<void> {
  const enc = encodeURIComponent(unitId);
  const sid = encodeURIComponent(startId);
  const [unit, s] = await Promise.all([getJson<UnitInfo>(`/v1/units/${enc}`), getJson<StartDetail>(`/v1/units/${enc}/starts/${sid}`)]);
  const u = unit.temperatureUnit;
  ctx.setCrumbs([['Fleet board', '#/'], [unit.name, `#/unit/${enc}`], [`Start ${when(s.crankAt)}`, null]]);
  const pic = h('div', { class: 'picture-holder', id: 'start-picture' }, h('p', { class: 'hint' }, 'Drawing the start…'));

  const phases = h('table', { class: 'grid compact', id: 'start-phases' }, h('thead', {}, h('tr', {}, ...['Phase', 'Began', 'Lasted', 'Speed at its start'].map((x) => h('th', { scope: 'col' }, x)))));
  const pb = h('tbody');
  for (const p of s.phases) pb.append(h('tr', { 'data-phase': p.phase }, h('td', {}, words(p.phase)), h('td', {}, when(p.startAt)), h('td', {}, seconds(p.durationS)), h('td', {}, p.speedPct === null ? '–' : `${p.speedPct.toFixed(1)} %`)));
  phases.append(pb);

  let lighting: HTMLElement;
  if (!s.lighting) lighting = h('p', { class: 'hint', id: 'start-lighting' }, 'No flame in this start, so no chamber lit.');
  else {
    const L = s.lighting;
    const late = new Map(L.lateChambers.map((x) => [x.chamber, x.lateByS]));
    const unlit = new Set(L.unlitChambers);
    const t = h('table', { class: 'grid compact', id: 'start-lighting' }, h('thead', {}, h('tr', {}, ...['Chamber', 'Lit after flame', 'At the end of warm-up (from the average chamber)', 'Deficit of the ring rise', 'Verdict'].map((x) => h('th', { scope: 'col' }, x)))));
    const b = h('tbody');
    for (const ch of L.chambers) {
      const verdict = unlit.has(ch.chamber) ? 'not lit' : late.has(ch.chamber) ? `lit ${seconds(late.get(ch.chamber)!)} late` : 'lit';
      b.append(
        h(
          'tr',
          { 'data-chamber': ch.chamber, class: unlit.has(ch.chamber) ? 'unlit' : late.has(ch.chamber) ? 'late' : '' },
          h('td', {}, `chamber ${ch.chamber}`),
          h('td', {}, ch.litAfterS === null ? 'not lit' : seconds(ch.litAfterS)),
          h('td', { class: ch.endDeviationC !== null && ch.endDeviationC < 0 ? 'cold' : null }, ch.endDeviationC === null ? '–' : `${ch.endDeviationC < 0 ? '−' : '+'}${dT(Math.abs(ch.endDeviationC), u)}`),
          h('td', {}, pct(ch.endDeficitFraction)),
          h('td', {}, unlit.has(ch.chamber) || late.has(ch.chamber) ? h('strong', {}, verdict) : verdict),
        ),
      );
    }
    t.append(b);
    lighting = h('div', {}, t, h('p', { class: 'sub' }, `Chamber estimates at the start-up swirl of ${Math.round(L.swirlDeg)}°, followed from flame established to ${when(L.windowEndAt)}. Chambers are numbered from 1.`));
  }

  const findings = h('ul', { class: 'alerts', id: 'start-findings' });
  for (const f of s.findings) {
    findings.append(
      h(
        'li',
        { class: `alert grade-${f.grade}` },
        h('div', { class: 'alert-head' }, gradeBadge(f.grade), h('strong', {}, ` ${words(f.kind)}${f.chamber !== null ? ` · chamber ${f.chamber}` : ''}`)),
        h('p', {}, f.message),
        h('p', { class: 'advice' }, f.advice),
        f.runnerUpChamber !== null ? h('p', { class: 'sub' }, `likelihood ${pct(f.likelihood)}; runner-up chamber ${f.runnerUpChamber} (${pct(f.runnerUpLikelihood)})`) : null,
      ),
    );
  }
  if (s.findings.length === 0) findings.append(h('li', { class: 'quiet' }, 'No finding: the start reached its end with every chamber lit in time.'));

  const bad = s.outcome !== 'completed' && s.outcome !== 'tripped_from_load';
  ctx.root.replaceChildren(
    h(
      'div',
      { class: 'pagehead' },
      h('h1', {}, `${unit.name} · start ${when(s.crankAt)}`),
      h('p', { class: 'sub', id: 'start-outcome' }, `${outcomeText(s)} · crossfire ${s.crossfireCompleteS === null ? 'not complete' : `complete ${s.crossfireCompleteS.toFixed(1)} s after flame`} · ${s.phases.length} phases`),
    ),
    h(
      'dl',
      { class: 'figures' },
      ...figure('Outcome', outcomeText(s), bad ? 'over' : ''),
      ...figure('Crossfire complete', s.crossfireCompleteS === null ? 'not complete' : `${s.crossfireCompleteS.toFixed(1)} s after flame`),
      ...figure('Spread at end of warm-up', dT(s.spreadEndOfWarmupC, u)),
      ...figure('Spread at full speed no load', dT(s.spreadFsnlC, u)),
      ...figure('Firing speed', s.firingSpeedPct === null ? '–' : `${s.firingSpeedPct.toFixed(1)} %`),
      ...figure('Starter drop-out speed', s.starterOffSpeedPct === null ? '–' : `${s.starterOffSpeedPct.toFixed(1)} %`),
      ...figure('Fuel at firing / warm-up', `${s.firingFuelKgS === null ? '–' : s.firingFuelKgS.toFixed(3)} / ${s.warmupFuelKgS === null ? '–' : s.warmupFuelKgS.toFixed(3)} kg/s`),
      ...figure('Flame seen by', s.flameSource === 'detector' ? 'flame detectors' : s.flameSource === 'exhaust' ? 'the exhaust rise' : '–'),
    ),
    panel('The start against time', pic),
    h('div', { class: 'two' }, panel('Phases', phases), panel('Chamber lighting', lighting)),
    panel('Findings', findings, h('p', { class: 'sub caution-note' }, s.caution)),
    h('p', {}, h('a', { href: `#/unit/${enc}` }, `Back to ${unit.name}`)),
  );
  await picture(pic, `/v1/units/${enc}/starts/${sid}/start.svg`);
}
