/**
 * The pre-outage review of one unit for combustion engineers: GET /v1/units/:unitId/review?from&to
 * as a printable HTML page, or CSV (?format=csv or Accept: text/csv). Chambers ranked by
 * evidence (current residual, drift, CUSUM, alert history in the window), thermocouples to
 * replace, how well the swirl curve and plume model fit, the alerts of the window, and the
 * cautions. The same document is written by `cansight report`. Assembling (reviewData) and
 * rendering (reviewHtml, reviewCsv) are separate so the command and the route share both.
 */
import { createHash } from 'node:crypto';
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { ADVISORY_CAUTION } from '../../core/findings.ts';
import type { AlertSummary, Grade, ReadsRepository } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import { esc } from '../svg/draw.ts';
import { trendSvg } from '../svg/trend.ts';
import { ringSvg } from '../svg/ring.ts';
import { UnitId } from '../schemas.ts';
import { chamberFigures, type ChamberRow } from './chambers.ts';
import { thermocoupleFigures, type ThermocoupleRow } from './thermocouples.ts';
import { chamberTrendInput, ringPlotInput } from './pictures.ts';
import { DAY_MS, Window, readErrors, readsOf, timeWindow, unitOr404 } from './read-common.ts';

export const REVIEW_MAX_DAYS = 400;
export const REVIEW_DEFAULT_DAYS = 90;

/** Weight of an alert in the evidence score, by grade. */
const GRADE_WEIGHT: Record<Grade, number> = { notice: 1, warning: 2, alarm: 4, critical: 8 };
const GRADE_RANK: Record<Grade, number> = { notice: 0, warning: 1, alarm: 2, critical: 3 };

export interface RankedChamber extends ChamberRow {
  rank: number;
  score: number;
  alertsInWindow: number;
  worstGradeInWindow: Grade | null;
  why: string[];
  nextStep: string;
}

export interface ReviewData {
  unit: { id: string; name: string; site: string; temperatureUnit: 'C' | 'F'; chambers: number; thermocouples: number; ratedPowerMw: number; swirl: UnitRecord['config']['swirl'] };
  from: string;
  to: string;
  generatedAt: string;
  latestTs: string | null;
  baseline: { version: number; windowFrom: string; windowTo: string; fittedAt: string; fittedBy: string; sampleCount: number } | null;
  chambers: RankedChamber[];
  thermocouples: ThermocoupleRow[];
  replace: ThermocoupleRow[];
  fit: { rings: number; meanFitSdC: number | null; p90FitSdC: number | null; meanWorstLikelihood: number | null; windowDays: number };
  alerts: AlertSummary[];
  pictures: { ring: string | null; trends: Array<{ chamber: number; svg: string }> };
  caution: string;
}

/**
 * Evidence score of a chamber (larger = stronger case to open it up): |residual| in units of
 * its daily scale (capped at 6), plus |drift per 30 days| in the same units when its interval
 * excludes zero (capped at 6), plus 2 for a CUSUM signal, plus the grade weights of its alerts
 * in the window (notice 1, warning 2, alarm 4, critical 8; capped at 16).
 */
export function evidenceScore(c: ChamberRow, alerts: AlertSummary[]): { score: number; why: string[] } {
  const why: string[] = [];
  const scale = c.sigmaC && c.sigmaC > 0.05 ? c.sigmaC : 1;
  let score = 0;
  if (c.residualC !== null) {
    const z = Math.min(6, Math.abs(c.residualC) / scale);
    score += z;
    if (z >= 2) why.push(`residual ${c.residualC > 0 ? 'hot' : 'cold'} by ${z.toFixed(1)} of its daily scale`);
  }
  if (c.driftCPer30d !== null && c.driftSignificant) {
    const z = Math.min(6, Math.abs(c.driftCPer30d) / scale);
    score += z;
    why.push(`drifting ${c.driftCPer30d < 0 ? 'colder' : 'hotter'} (interval excludes zero)`);
  }
  if (c.cusum?.signal) {
    score += 2;
    why.push(`CUSUM signals ${c.cusum.signal === 'down' ? 'colder' : 'hotter'}`);
  }
  const w = Math.min(16, alerts.reduce((s, a) => s + GRADE_WEIGHT[a.grade], 0));
  if (alerts.length) why.push(`${alerts.length} alert${alerts.length > 1 ? 's' : ''} in the window`);
  score += w;
  return { score: Math.round(score * 10) / 10, why };
}

function nextStep(c: ChamberRow, score: number): string {
  if (score < 3) return 'No action indicated by the exhaust ring.';
  const cold = (c.residualC ?? 0) < 0 || (c.driftCPer30d ?? 0) < 0;
  return cold
    ? `Borescope chamber ${c.chamber}; inspect its fuel nozzle for plugging or coking and its check valve; look at the liner, transition piece and crossfire tubes.`
    : `Inspect chamber ${c.chamber} fuel nozzle tip for erosion and check its fuel split for over-fuelling.`;
}

export async function reviewData(reads: ReadsRepository, unit: UnitRecord, q: { from?: string; to?: string }, nowMs: number): Promise<ReviewData> {
  const latest = await reads.analysisNear(unit.id, null);
  // Without `to`, the window ends at the latest analysed ring (the unit may be shut down for the outage).
  const anchor = q.to ? undefined : latest ? Date.parse(latest.ts) + 1000 : nowMs;
  const w = timeWindow({ from: q.from, to: q.to ?? new Date(anchor!).toISOString() }, nowMs, REVIEW_DEFAULT_DAYS, REVIEW_MAX_DAYS, 'A pre-outage review');
  const fitFrom = Math.max(w.fromMs, w.toMs - 7 * DAY_MS);
  const [ch, tc, alerts, baseline, fit, readings] = await Promise.all([
    chamberFigures(reads, unit, nowMs),
    thermocoupleFigures(reads, unit, nowMs),
    reads.unitAlerts(unit.id, w.fromMs, w.toMs, 2000),
    reads.latestBaseline(unit.id),
    reads.fitQuality(unit.id, fitFrom, w.toMs),
    latest ? reads.ringReadings(unit.id, latest.ts) : Promise.resolve(null),
  ]);
  const ranked: RankedChamber[] = ch.chambers
    .map((c) => {
      const mine = alerts.filter((a) => a.chamber === c.chamber);
      const { score, why } = evidenceScore(c, mine);
      const worst = mine.reduce<Grade | null>((g, a) => (g === null || GRADE_RANK[a.grade] > GRADE_RANK[g] ? a.grade : g), null);
      return { ...c, rank: 0, score, why, alertsInWindow: mine.length, worstGradeInWindow: worst, nextStep: nextStep(c, score) };
    })
    .sort((a, b) => b.score - a.score || a.chamber - b.chamber)
    .map((c, i) => ({ ...c, rank: i + 1 }));
  const top = ranked.filter((c) => c.score >= 3).slice(0, 3);
  const trends = await Promise.all(top.map(async (c) => ({ chamber: c.chamber, svg: trendSvg(await chamberTrendInput(reads, unit, c.chamber, w.fromMs, w.toMs)) })));
  return {
    unit: { id: unit.id, name: unit.name, site: unit.site, temperatureUnit: unit.config.temperatureUnit, chambers: unit.config.chambers.count, thermocouples: unit.config.thermocouples.count, ratedPowerMw: unit.config.ratedPowerMw, swirl: unit.config.swirl },
    from: new Date(w.fromMs).toISOString(),
    to: new Date(w.toMs).toISOString(),
    generatedAt: new Date(nowMs).toISOString(),
    latestTs: latest?.ts ?? null,
    baseline: baseline ? { version: baseline.version, windowFrom: baseline.windowFrom, windowTo: baseline.windowTo, fittedAt: baseline.fittedAt, fittedBy: baseline.fittedBy, sampleCount: baseline.sampleCount } : null,
    chambers: ranked,
    thermocouples: tc.rows,
    replace: tc.rows.filter((r) => r.replace),
    fit: { ...fit, windowDays: Math.round(((w.toMs - fitFrom) / DAY_MS) * 10) / 10 },
    alerts,
    pictures: { ring: latest ? ringSvg(ringPlotInput(unit, latest, readings)) : null, trends },
    caution: ADVISORY_CAUTION,
  };
}

// ---------------------------------------------------------------------------------------------
// Rendering.

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
  const rows = (cells: string[]) => `<tr>${cells.join('')}</tr>`;
  const chamberRows = d.chambers
    .map((c) =>
      rows([
        `<td class="n">${c.rank}</td>`,
        `<td>chamber ${c.chamber}</td>`,
        `<td class="n">${c.score.toFixed(1)}</td>`,
        `<td class="n">${dT(c.residualC, u, 1, true)}</td>`,
        `<td class="n">${dT(c.driftCPer30d, u, 2, true)}${c.driftIntervalCPer30d ? `<br><span class="why">${dT(c.driftIntervalCPer30d[0], u, 2, true)} to ${dT(c.driftIntervalCPer30d[1], u, 2, true)}</span>` : ''}</td>`,
        `<td>${c.cusum ? (c.cusum.signal ? (c.cusum.signal === 'down' ? 'signal: colder' : 'signal: hotter') : 'in control') : '–'}</td>`,
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
        .map((a) => rows([`<td>${day(a.raisedAt)}</td>`, `<td class="grade-${a.grade}">${a.grade}</td>`, `<td>${esc(a.kind.replace(/_/g, ' '))}</td>`, `<td>${a.chamber !== null ? `chamber ${a.chamber}` : a.thermocouple !== null ? `thermocouple ${a.thermocouple}` : 'unit'}</td>`, `<td>${a.active ? 'active' : `returned to normal ${day(a.clearedAt)}`}${a.acknowledged ? ', acknowledged' : ''}</td>`, `<td>${esc(a.message)}</td>`]))
        .join('')
    : `<tr><td colspan="6" class="none">No alert in the window.</td></tr>`;
  const curve = d.unit.swirl.curve.map(([l, s]) => `${Math.round(l * 100)} % → ${s}°`).join(', ');
  const pitch = 360 / d.unit.chambers;
  const fit = d.fit;
  const fitLine = fit.rings
    ? `Over the last ${fit.windowDays} days of the window (${fit.rings} steady rings) the plume model left a residual of ${dT(fit.meanFitSdC, u)} on average (90th percentile ${dT(fit.p90FitSdC, u)}); the chamber most out of line was named with an average likelihood of ${fit.meanWorstLikelihood === null ? '–' : Math.round(fit.meanWorstLikelihood * 100) + ' %'}.`
    : 'No steady ring in the last week of the window: the fit cannot be judged.';
  const fitAdvice =
    fit.meanWorstLikelihood !== null && fit.meanWorstLikelihood < 0.6
      ? `Attribution is uncertain: check the runner-up chamber too, and consider a swirl calibration (POST /v1/units/${esc(d.unit.id)}/swirl/calibrate) from a fuel-bias test.`
      : 'Attribution is clear enough to name chambers; a cold plume that moves with load when the curve says it should not means the curve needs recalibrating.';
  return `<!doctype html><html lang="en"><head><meta charset="utf-8"><title>Pre-outage review · ${esc(d.unit.name)}</title><style>${REVIEW_STYLE}</style></head><body>
<h1>Pre-outage review: ${esc(d.unit.name)} (${esc(d.unit.id)})</h1>
<p class="sub">${esc(d.unit.site)} · ${d.unit.chambers} combustion chambers · ${d.unit.thermocouples} exhaust thermocouples · rated ${d.unit.ratedPowerMw} MW at ISO conditions</p>
<p class="sub">Window ${day(d.from)} to ${day(d.to)} · latest analysed ring ${day(d.latestTs)} · ${d.baseline ? `baseline version ${d.baseline.version} (reference ${day(d.baseline.windowFrom)} to ${day(d.baseline.windowTo)}, fitted ${day(d.baseline.fittedAt)} by ${esc(d.baseline.fittedBy)}, ${d.baseline.sampleCount} rings)` : 'no baseline fitted yet: residuals and drift are not available'} · made ${day(d.generatedAt)}</p>
<div class="caution"><strong>Caution.</strong> ${esc(d.caution)} This review ranks evidence from the exhaust ring only; confirm with inspection before replacing parts.</div>
<h2>Chambers ranked by evidence</h2>
<table><thead><tr><th>Rank</th><th>Chamber</th><th>Evidence</th><th>Residual now</th><th>Drift per 30 days (95 % interval)</th><th>CUSUM</th><th>Alerts in window</th><th>Next step</th></tr></thead><tbody>${chamberRows}</tbody></table>
<p class="sub">Evidence: |residual| in units of the chamber's daily scale (up to 6), plus |drift| in the same units when its interval excludes zero (up to 6), plus 2 for a CUSUM signal, plus alerts in the window (notice 1, warning 2, alarm 4, critical 8; up to 16). Residuals have the all-chamber (common-mode) movement removed.</p>
${d.pictures.trends.length ? `<h2>Trends of the leading chambers</h2><div class="pics">${d.pictures.trends.map((t) => t.svg).join('')}</div>` : ''}
<h2>Thermocouples to replace</h2>
<table><thead><tr><th>TC</th><th>Angle</th><th>Now</th><th>Not used (last week of data)</th><th>Advice</th></tr></thead><tbody>${tcRows}</tbody></table>
<h2>Swirl curve and chamber map</h2>
<p>Configured swirl (sense ${d.unit.swirl.sense > 0 ? '+1' : '−1'}): ${esc(curve)}. Chamber pitch ${pitch.toFixed(1)}°.</p>
<p>${fitLine}</p><p>${fitAdvice}</p>
${d.pictures.ring ? `<div class="pics">${d.pictures.ring}</div>` : ''}
<h2>Alerts in the window</h2>
<table><thead><tr><th>Raised</th><th>Grade</th><th>Kind</th><th>Subject</th><th>State</th><th>Message</th></tr></thead><tbody>${alertRows}</tbody></table>
<div class="caution"><strong>Caution.</strong> ${esc(d.caution)}</div>
</body></html>`;
}

function csvCell(v: unknown): string {
  if (v === null || v === undefined) return '';
  const s = typeof v === 'number' ? (Number.isFinite(v) ? String(Math.round(v * 1000) / 1000) : '') : String(v);
  return /[",\n\r]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s;
}

export const REVIEW_CSV_COLUMNS = ['section', 'subject', 'number', 'rank', 'evidence', 'residual_c', 'drift_c_per_30d', 'drift_low_c_per_30d', 'drift_high_c_per_30d', 'cusum', 'alerts_in_window', 'worst_grade_in_window', 'invalid_share', 'advice'];

export function reviewCsv(d: ReviewData): string {
  const lines = [REVIEW_CSV_COLUMNS.join(',')];
  const push = (cells: unknown[]) => lines.push(cells.map(csvCell).join(','));
  for (const c of d.chambers) {
    push(['chamber', 'chamber', c.chamber, c.rank, c.score, c.residualC, c.driftCPer30d, c.driftIntervalCPer30d?.[0], c.driftIntervalCPer30d?.[1], c.cusum?.signal ?? (c.cusum ? 'in_control' : ''), c.alertsInWindow, c.worstGradeInWindow, '', c.nextStep]);
  }
  for (const t of d.thermocouples) {
    push(['thermocouple', t.replace ? 'replace' : 'keep', t.thermocouple, '', '', t.residualC, t.driftCPer30d, t.driftIntervalCPer30d?.[0], t.driftIntervalCPer30d?.[1], '', d.alerts.filter((a) => a.thermocouple === t.thermocouple).length, '', t.invalidShare, t.verdict]);
  }
  push(['window', `${d.from} to ${d.to}`, '', '', '', '', '', '', '', '', d.alerts.length, '', '', d.baseline ? `baseline version ${d.baseline.version}` : 'no baseline']);
  push(['caution', '', '', '', '', '', '', '', '', '', '', '', '', d.caution]);
  return lines.join('\r\n') + '\r\n';
}

export async function reviewRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.get('/v1/units/:unitId/review', {
    schema: {
      tags: ['read'],
      summary: 'Pre-outage review: chambers ranked by evidence, thermocouples to replace, swirl fit, alerts and cautions (printable HTML, or CSV)',
      description: `Default window: the ${REVIEW_DEFAULT_DAYS} days up to the latest analysed ring; at most ${REVIEW_MAX_DAYS} days. CSV with ?format=csv or Accept: text/csv.`,
      produces: ['text/html', 'text/csv'],
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object({ ...Window, format: Type.Optional(Type.Union([Type.Literal('html'), Type.Literal('csv')])) }, { additionalProperties: false }),
      response: { 200: Type.String({ description: 'HTML page or CSV' }), ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const accept = String(request.headers.accept ?? '');
    const csv = request.query.format === 'csv' || (request.query.format === undefined && /\btext\/csv\b/.test(accept) && !/\btext\/html\b/.test(accept));
    const d = await reviewData(reads, unit, request.query, Date.now());
    if (csv) {
      return reply
        .header('content-type', 'text/csv; charset=utf-8')
        .header('content-disposition', `attachment; filename="cansight-review-${unit.id}-${d.to.slice(0, 10)}.csv"`)
        .send(reviewCsv(d));
    }
    return reply.header('content-type', 'text/html; charset=utf-8').send(reviewHtml(d));
  });
}
