/**
 * The pre-outage review as a printable HTML page: one document, its own style sheet (whose
 * hash the dashboard's content policy allows, as the dashboard opens the page), temperatures
 * in the unit's own scale, and the caution at the top and the bottom.
 */
import { createHash } from 'node:crypto';
import { esc } from '../svg/draw.ts';
import { defaultThresholds } from '../../core/findings.ts';
import type { ReviewData } from './data.ts';
import { eventLabel } from '../routes/events.ts';

/** The review page's style sheet; its hash is allowed by the dashboard's policy, which opens the page. */
export const REVIEW_STYLE = `
body{font-family:"DejaVu Sans",Arial,sans-serif;font-size:12px;color:#111;margin:18px 28px;max-width:1000px}
h1{font-size:20px;margin:0 0 2px}h2{font-size:15px;border-bottom:2px solid #111;padding-bottom:2px;margin:20px 0 6px}
.sub{color:#444;margin:2px 0}.caution{border:2px solid #111;padding:6px 10px;margin:10px 0;background:#f3f1ea}
table{border-collapse:collapse;width:100%;margin:4px 0}th,td{border-bottom:1px solid #bbb;padding:3px 5px;text-align:left;vertical-align:top}
th{border-bottom:2px solid #111;font-size:11px}td.n{text-align:right;white-space:nowrap}.why{color:#333;font-size:11px}
.pics{display:flex;flex-wrap:wrap;gap:10px}.pics svg{max-width:100%;height:auto;border:1px solid #ccc}
.grade-alarm,.grade-critical{font-weight:bold}.none{color:#555;font-style:italic}
@media print{body{margin:8mm}h2{break-after:avoid}table,svg{break-inside:avoid}}
`;

export const REVIEW_STYLE_HASH = `'sha256-${createHash('sha256').update(REVIEW_STYLE).digest('base64')}'`;

function dT(degC: number | null | undefined, u: 'C' | 'F', digits = 1, signed = false): string {
  if (degC === null || degC === undefined || !Number.isFinite(degC)) return '–';
  const v = u === 'F' ? degC * 1.8 : degC;
  return `${signed && v > 0 ? '+' : ''}${v.toFixed(digits)} °${u}`;
}

const day = (iso: string | null) => (iso ? iso.slice(0, 16).replace('T', ' ') + ' UTC' : '–');

export function reviewHtml(d: ReviewData): string {
  const u = d.unit.temperatureUnit;
  const noBaseline = d.notJudged.some((x) => x.part === 'baseline');
  const noDrift = noBaseline || d.notJudged.some((x) => x.part === 'drift');
  const orNot = (v: number | null, text: string, why: boolean) => (v === null && why ? '<span class="why">not judged</span>' : text);
  const subject = (a: { chamber: number | null; thermocouple: number | null }) => (a.chamber !== null ? `chamber ${a.chamber}` : a.thermocouple !== null ? `thermocouple ${a.thermocouple}` : 'unit');
  const rows = (cells: string[]) => `<tr>${cells.join('')}</tr>`;
  const chamberRows = d.chambers
    .map((c) =>
      rows([
        `<td class="n">${c.rank}</td>`,
        `<td>chamber ${c.chamber}</td>`,
        `<td class="n">${c.score.toFixed(1)}</td>`,
        `<td class="n">${!c.observable && c.notObservableReason ? '<span class="why">not observable</span>' : orNot(c.residualC, dT(c.residualC, u, 1, true), noBaseline)}</td>`,
        `<td class="n">${orNot(c.driftCPer30d, dT(c.driftCPer30d, u, 2, true), noDrift)}${c.driftIntervalCPer30d ? `<br><span class="why">${dT(c.driftIntervalCPer30d[0], u, 2, true)} to ${dT(c.driftIntervalCPer30d[1], u, 2, true)}</span>` : ''}</td>`,
        `<td>${c.cusum ? (c.cusum.signal ? (c.cusum.signal === 'down' ? 'signal: colder' : 'signal: hotter') : 'in control') : noDrift ? '<span class="why">not judged</span>' : '–'}</td>`,
        `<td class="grade-${c.worstGradeInWindow ?? 'none'}">${c.alertsInWindow}${c.worstGradeInWindow ? ` (worst ${c.worstGradeInWindow})` : ''}</td>`,
        `<td>${esc(c.nextStep)}${c.why.length ? `<div class="why">${esc(c.why.join('; '))}</div>` : ''}</td>`,
      ]),
    )
    .join('');
  const tcRows = d.replace.length
    ? d.replace
        .map((t) => rows([`<td class="n">${t.thermocouple}</td>`, `<td class="n">${t.angleDeg.toFixed(0)}°</td>`, `<td>${t.valid ? 'used' : `not used: ${esc((t.reason ?? '').replace(/_/g, ' '))}`}</td>`, `<td class="n">${t.invalidShare === null ? '–' : Math.round(t.invalidShare * 100) + ' %'}</td>`, `<td>${esc(t.verdict)}</td>`]))
        .join('')
    : `<tr><td colspan="5" class="none">No thermocouple needs replacing on the evidence of the exhaust ring.</td></tr>`;
  const alertRows = d.alerts.length
    ? d.alerts
        .slice(0, 200)
        .map((a) => rows([`<td>${day(a.raisedAt)}</td>`, `<td class="grade-${a.grade}">${a.grade}</td>`, `<td>${esc(a.kind.replace(/_/g, ' '))}</td>`, `<td>${subject(a)}</td>`, `<td>${a.active ? 'active' : `returned to normal ${day(a.clearedAt)}`}${a.acknowledged ? ', acknowledged' : ''}</td>`, `<td>${esc(a.message)}</td>`]))
        .join('')
    : `<tr><td colspan="6" class="none">No alert in the window.</td></tr>`;
  const callRows = d.calls.length
    ? d.calls
        .slice(0, 200)
        .map((c) => rows([`<td>${day(c.raisedAt)}</td>`, `<td>${esc(c.kind.replace(/_/g, ' '))}</td>`, `<td>${subject(c)}</td>`, `<td>${c.outcome ? esc(c.outcome.outcome.replace('_', ' ')) : '<strong>open: to inspect</strong>'}</td>`, `<td>${c.outcome?.inspectedAt ? day(c.outcome.inspectedAt) : '–'}</td>`, `<td>${esc(c.outcome?.found ?? '')}${c.outcome ? `<div class="why">recorded by ${esc(c.outcome.recordedBy)}</div>` : ''}</td>`]))
        .join('')
    : `<tr><td colspan="6" class="none">No call to inspect a chamber or thermocouple in the window.</td></tr>`;
  const eventRows = d.events.length
    ? d.events.map((e) => rows([`<td>${day(e.at)}</td>`, `<td>${esc(eventLabel(e))}</td>`, `<td>${esc(e.by)}</td>`, `<td>${esc(e.note ?? '')}${Object.keys(e.learntOffsetsC).length ? `<div class="why">offset learnt: ${Object.entries(e.learntOffsetsC).map(([k, v]) => `thermocouple ${k} ${dT(v, u, 1, true)}`).join(', ')}</div>` : ''}</td>`])).join('')
    : `<tr><td colspan="4" class="none">No maintenance event recorded in the window.</td></tr>`;
  const curve = d.unit.swirl.curve.map(([l, s]) => `${Math.round(l * 100)} % → ${s}°`).join(', ');
  const pitch = 360 / d.unit.chambers;
  const fit = d.fit;
  const fitLine = fit.rings
    ? `Over the last ${fit.windowDays} days of the window (${fit.rings} steady rings) the plume model left a residual of ${dT(fit.meanFitSdC, u)} on average (90th percentile ${dT(fit.p90FitSdC, u)}); the chamber departing most from its normal was named with an average likelihood of ${fit.meanWorstLikelihood === null ? '–' : Math.round(fit.meanWorstLikelihood * 100) + ' %'} (low while every chamber is within its scatter; near 100 % when one stands out).`
    : 'No steady ring in the last week of the window: the fit cannot be judged.';
  const fitAdvice = `Each chamber alert names its runner-up chamber with its likelihood, since swirl is uncertain; a cold plume that moves with load when the curve says it should not means the curve needs recalibrating (POST /v1/units/${esc(d.unit.id)}/swirl/calibrate, from a fuel-bias test).`;
  return `<!doctype html><html lang="en"><head><meta charset="utf-8"><title>Pre-outage review · ${esc(d.unit.name)}</title><style>${REVIEW_STYLE}</style></head><body>
<h1>Pre-outage review: ${esc(d.unit.name)} (${esc(d.unit.id)})</h1>
<p class="sub">${esc(d.unit.site)} · ${d.unit.chambers} combustion chambers · ${d.unit.thermocouples} exhaust thermocouples · rated ${d.unit.ratedPowerMw} MW at ISO conditions</p>
<p class="sub">Window ${day(d.from)} to ${day(d.to)} · latest analysed ring ${day(d.latestTs)} · ${d.baseline ? `baseline version ${d.baseline.version} (reference ${day(d.baseline.windowFrom)} to ${day(d.baseline.windowTo)}, fitted ${day(d.baseline.fittedAt)} by ${esc(d.baseline.fittedBy)}, ${d.baseline.sampleCount} rings)` : 'no baseline fitted yet: residuals and drift are not available'} · made ${day(d.generatedAt)}</p>
<div class="caution"><strong>Caution.</strong> ${esc(d.caution)} This review ranks evidence from the exhaust ring only; confirm with inspection before replacing parts.</div>
${d.notJudged.length ? `<h2>Not judged yet</h2><ul class="not-judged">${d.notJudged.map((x) => `<li>${esc(x.reason)}</li>`).join('')}</ul><p class="sub">Cells marked “not judged” below are empty for these reasons.</p>` : ''}
<h2>Chambers ranked by evidence</h2>
<table><thead><tr><th>Rank</th><th>Chamber</th><th>Evidence</th><th>Residual now</th><th>Drift per 30 days (95 % interval)</th><th>CUSUM</th><th>Alerts in window</th><th>Next step</th></tr></thead><tbody>${chamberRows}</tbody></table>
<p class="sub">Evidence: |residual| in units of the chamber's daily scale (up to 6), plus |drift| in the same units when its interval excludes zero (up to 6), plus 2 for a CUSUM signal, plus alerts in the window (notice 1, warning 2, alarm 4, critical 8; up to 16). Residuals have the all-chamber (common-mode) movement removed. An inspection is advised only on a chamber alert of warning grade or worse in the window, or on a residual or a significant drift at the alerts' warning levels (${dT(defaultThresholds.chamberColdWarningDegC, u)}; ${dT(defaultThresholds.driftWarningDegCPer30Days, u)} per 30 days); the ranking orders the rest.</p>
${d.pictures.trends.length ? `<h2>Trends of the leading chambers</h2><div class="pics">${d.pictures.trends.map((t) => t.svg).join('')}</div>` : ''}
<h2>Thermocouples to replace</h2>
<table><thead><tr><th>TC</th><th>Angle</th><th>Now</th><th>Not used (last week of data)</th><th>Advice</th></tr></thead><tbody>${tcRows}</tbody></table>
<h2>Swirl curve and chamber map</h2>
<p>Configured swirl (sense ${d.unit.swirl.sense > 0 ? '+1' : '−1'}): ${esc(curve)}. Chamber pitch ${pitch.toFixed(1)}°.</p>
<p>${fitLine}</p><p>${fitAdvice}</p>
${d.pictures.ring ? `<div class="pics">${d.pictures.ring}</div>` : ''}
<h2>Maintenance events in the window</h2>
<table><thead><tr><th>When (ring time)</th><th>Event</th><th>By</th><th>Note</th></tr></thead><tbody>${eventRows}</tbody></table>
<h2>Calls to inspect and their outcomes</h2>
<table><thead><tr><th>Raised</th><th>Kind</th><th>Subject</th><th>Outcome</th><th>Inspected</th><th>Found</th></tr></thead><tbody>${callRows}</tbody></table>
<p class="sub">Record what an inspection found with POST /v1/alerts/{id}/outcome; the counts per kind are at GET /v1/units/${esc(d.unit.id)}/outcomes.</p>
<h2>Alerts in the window</h2>
<table><thead><tr><th>Raised</th><th>Grade</th><th>Kind</th><th>Subject</th><th>State</th><th>Message</th></tr></thead><tbody>${alertRows}</tbody></table>
<div class="caution"><strong>Caution.</strong> ${esc(d.caution)}</div>
</body></html>`;
}
