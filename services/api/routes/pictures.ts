/**
 * Pictures made on the server (image/svg+xml): the exhaust ring nearest an instant
 * (GET /v1/units/:unitId/ring.svg?at=), a chamber's residual trend with its normal band, drift
 * line and alert marks (GET /v1/units/:unitId/chambers/:chamber/trend.svg?from&to), and the
 * unit's exhaust spread against its limit (GET /v1/units/:unitId/spread.svg?from&to).
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { VALIDITY_REASONS, chamberAnglesDeg, chamberNotObservableReason, plumeAngleDeg, thermocoupleAnglesDeg } from '../../core/index.ts';
import type { AlertSummary, ReadsRepository, StoredAnalysis } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import { notFound } from '../../http/errors.ts';
import { UnitId } from '../schemas.ts';
import { ringSvg, type RingPlotInput } from '../svg/ring.ts';
import { esc, svgOpen } from '../svg/draw.ts';
import { spreadSvg, type SpreadPoint } from '../svg/spread.ts';
import { trendSvg, type TrendPlotInput } from '../svg/trend.ts';
import { eventLabel } from './events.ts';
import { ChamberParams, TREND_MAX_DAYS, configOf, residualTrend } from './chambers.ts';
import { DAY_MS, Window, readErrors, readWindow, readsOf, timeWindow, unitOr404 } from './read-common.ts';

const Svg = { 200: Type.String({ description: 'SVG document (image/svg+xml)' }), ...readErrors };
const svgType = 'image/svg+xml; charset=utf-8';

/** The ring plot's input from a stored analysis and the ring's raw readings. */
export function ringPlotInput(unit: UnitRecord, a: StoredAnalysis, readings: (number | null)[] | null): RingPlotInput {
  const config = configOf(unit, a);
  const tc = thermocoupleAnglesDeg(config);
  const ch = chamberAnglesDeg(config);
  const load = a.loadFraction;
  return {
    title: `${unit.name} (${unit.id})`,
    ts: a.ts.replace('.000Z', 'Z'),
    temperatureUnit: config.temperatureUnit,
    view: config.view ?? 'downstream',
    loadFraction: load,
    swirlDeg: a.swirlDeg,
    spreadC: a.spreadC,
    limitC: a.spreadLimitC,
    thermocouples: Array.from(tc, (angle, i) => {
      const code = a.validity[i] ?? 1;
      return {
        number: i + 1,
        angleDeg: angle,
        readingC: readings?.[i] ?? null,
        deviationC: a.tcDeviationC[i] ?? null,
        valid: code === 0 && a.tcDeviationC[i] !== null,
        reason: code === 0 ? (a.tcDeviationC[i] === null ? 'missing' : null) : (VALIDITY_REASONS[code] ?? 'invalid'),
      };
    }),
    chambers: Array.from(ch, (angle, k) => ({
      number: k + 1,
      angleDeg: angle,
      plumeAngleDeg: load === null ? angle : plumeAngleDeg(config, k, load),
      deviationC: a.chamberDeviationC[k] ?? null,
      notObservableReason: chamberNotObservableReason(a.chamberDeviationC, k),
    })),
  };
}

/** A picture that says there is nothing to draw yet (so a page shows a sentence, not a broken image). */
export function placeholderSvg(title: string, message: string): string {
  return `${svgOpen(560, 120, title)}<text x="20" y="32" font-size="15" font-weight="bold">${esc(title)}</text><text x="20" y="64" class="empty">${esc(message)}</text></svg>`;
}

const alertLabel = (a: AlertSummary) => `${a.grade} ${a.kind.replace(/_/g, ' ')} raised ${a.raisedAt.slice(0, 16).replace('T', ' ')}: ${a.message}`;

/** The chamber trend picture's input: rollup residuals, drift line, band and alert marks. */
export async function chamberTrendInput(reads: ReadsRepository, unit: UnitRecord, chamber: number, fromMs: number, toMs: number): Promise<TrendPlotInput> {
  const [residual, drift, alerts, events] = await Promise.all([
    residualTrend(reads, unit.id, 'chamber_residual', chamber, fromMs, toMs),
    reads.driftStates(unit.id, 'chamber'),
    reads.unitAlerts(unit.id, fromMs, toMs, 1000),
    reads.events(unit.id, fromMs, toMs),
  ]);
  // Before a baseline there is no residual: show the deviation from the average chamber instead, and say so.
  const deviation = residual.points.length === 0;
  const trend = deviation ? await residualTrend(reads, unit.id, 'chamber_deviation', chamber, fromMs, toMs) : residual;
  const d = drift.find((x) => x.index === chamber);
  const points = trend.points.filter((p) => p.meanC !== null).map((p) => ({ tMs: Date.parse(p.ts), meanC: p.meanC!, minC: p.minC, maxC: p.maxC, count: p.n }));
  let line: TrendPlotInput['drift'] = null;
  if (!deviation && d?.rate && Number.isFinite(d.rate.per30DaysDegC) && points.length >= 2) {
    // Slope from the worker's drift rate; level fitted to the points of the drift's own days.
    const slope = d.rate.per30DaysDegC / 30;
    const lastMs = Date.parse(d.lastDay + 'T00:00:00Z') + DAY_MS;
    const inWindow = points.filter((p) => p.tMs >= lastMs - Math.max(d.days, 1) * DAY_MS - DAY_MS && p.tMs <= lastMs);
    const use = inWindow.length >= 2 ? inWindow : points;
    const intercept = use.reduce((s, p) => s + p.meanC - (slope * (p.tMs - fromMs)) / DAY_MS, 0) / use.length;
    line = { interceptC: intercept, slopeCPerDay: slope, label: `drift ${d.rate.per30DaysDegC >= 0 ? '+' : ''}${d.rate.per30DaysDegC.toFixed(2)} °C per 30 days` };
  }
  const u = unit.config.temperatureUnit;
  const span = (toMs - fromMs) / DAY_MS;
  return {
    title: deviation ? `${unit.name}: chamber ${chamber} deviation from the average chamber` : `${unit.name}: chamber ${chamber} residual`,
    subtitle: deviation
      ? `${trend.every === '1h' ? 'hourly' : 'daily'} means over ${span < 2 ? (span * 24).toFixed(0) + ' hours' : span.toFixed(0) + ' days'} · no baseline yet, so no residual: this is the raw chamber estimate${trend.points.length ? '' : ' · no analysed ring in this window'}`
      : `${trend.every === '1h' ? 'hourly' : 'daily'} means over ${span < 2 ? (span * 24).toFixed(0) + ' hours' : span.toFixed(0) + ' days'}, steady rings only, against the baseline at the same corrected load${d?.rate ? ` · drift 95 % interval ${fmt(d.rate.per30DaysInterval[0], u)} to ${fmt(d.rate.per30DaysInterval[1], u)} per 30 days` : ''}`,
    temperatureUnit: u,
    fromMs,
    toMs,
    points,
    quantity: deviation ? 'deviation' : 'residual',
    bandC: !deviation && d?.sigmaC ? 2 * d.sigmaC : null,
    baselineVersion: deviation ? null : (d?.baselineVersion ?? null),
    drift: line,
    alerts: alerts.filter((a) => a.chamber === chamber).map((a) => ({ tMs: Date.parse(a.raisedAt), grade: a.grade, label: alertLabel(a) })),
    events: events.map((e) => ({ tMs: Date.parse(e.at), label: eventLabel(e) })),
  };
}

function fmt(degC: number, u: 'C' | 'F'): string {
  const v = u === 'F' ? degC * 1.8 : degC;
  return `${v >= 0 ? '+' : ''}${v.toFixed(2)} °${u}`;
}

/**
 * A default window (no `from` given) starts no earlier than the unit's first analysed ring in
 * it, so a unit with a few hours of data is drawn over those hours, not squeezed into a corner.
 */
async function clampToData(reads: ReadsRepository, unitId: string, w: { fromMs: number; toMs: number }, fromGiven: boolean): Promise<{ fromMs: number; toMs: number }> {
  if (fromGiven) return w;
  const first = await reads.firstAnalysisTs(unitId, w.fromMs);
  if (first === null || first <= w.fromMs) return w;
  const span = w.toMs - first;
  return { fromMs: Math.max(w.fromMs, first - Math.max(span * 0.03, 60_000)), toMs: w.toMs };
}

export async function pictureRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.get('/v1/units/:unitId/ring.svg', {
    schema: {
      tags: ['pictures'],
      summary: 'The exhaust ring as a polar plot: thermocouple deviations, invalid ones marked, chambers and their plumes after swirl, spread and limit',
      produces: ['image/svg+xml'],
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object({ at: Type.Optional(Type.String({ format: 'date-time', description: 'draw the analysed ring nearest this instant; default the latest' })) }, { additionalProperties: false }),
      response: Svg,
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const a = await reads.analysisNear(unit.id, request.query.at ? Date.parse(request.query.at) : null);
    if (!a) return reply.header('content-type', svgType).send(placeholderSvg(`${unit.name} (${unit.id}): exhaust ring`, 'No analysed ring yet: the ring plot appears once rings arrive and are analysed.'));
    const readings = await reads.ringReadings(unit.id, a.ts);
    return reply.header('content-type', svgType).send(ringSvg(ringPlotInput(unit, a, readings)));
  });

  app.get('/v1/units/:unitId/chambers/:chamber/trend.svg', {
    schema: {
      tags: ['pictures'],
      summary: 'A chamber\'s residual trend with its normal band, drift line and alert marks (default the 90 days up to the unit\'s last ring; at most 3700)',
      produces: ['image/svg+xml'],
      params: ChamberParams,
      querystring: Type.Object(Window, { additionalProperties: false }),
      response: Svg,
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const k = request.params.chamber;
    if (k > unit.config.chambers.count) throw notFound(`Unit ${unit.id} has ${unit.config.chambers.count} chambers; chamber ${k} does not exist (chambers are numbered from 1).`);
    const w = await clampToData(reads, unit.id, await readWindow(reads, unit.id, request.query, 90, TREND_MAX_DAYS, 'A chamber trend', reply), Boolean(request.query.from));
    return reply.header('content-type', svgType).send(trendSvg(await chamberTrendInput(reads, unit, k, w.fromMs, w.toMs)));
  });

  app.get('/v1/units/:unitId/spread.svg', {
    schema: {
      tags: ['pictures'],
      summary: 'The unit\'s exhaust spread against its limit over time (default the 7 days up to the unit\'s last ring; at most 400)',
      produces: ['image/svg+xml'],
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object(Window, { additionalProperties: false }),
      response: Svg,
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const w = await clampToData(reads, unit.id, await readWindow(reads, unit.id, request.query, 7, 400, 'A spread trend', reply), Boolean(request.query.from));
    const days = (w.toMs - w.fromMs) / DAY_MS;
    let points: SpreadPoint[];
    let what: string;
    if (days <= 7) {
      // From the analysed rings: about 200 buckets, whole minutes.
      const bucketS = Math.max(60, Math.ceil((w.toMs - w.fromMs) / 1000 / 200 / 60) * 60);
      const rows = await reads.rawSeries(unit.id, w.fromMs, w.toMs, bucketS, 2000);
      points = rows.map((r) => ({ tMs: Date.parse(r.ts), meanC: r.figures.spreadC.mean, minC: r.figures.spreadC.min, maxC: r.figures.spreadC.max, limitC: r.figures.spreadLimitC.mean }));
      what = `${Math.round(bucketS / 60)}-minute buckets`;
    } else {
      const period = days <= 31 ? 'hour' : 'day';
      const rows = await reads.rollupSeries(unit.id, period, w.fromMs, w.toMs, ['spread']);
      points = rows.map((r) => ({ tMs: r.bucketMs, meanC: r.mean[0], minC: r.min[0], maxC: r.max[0], limitC: null }));
      what = `${period === 'hour' ? 'hourly' : 'daily'} buckets (limit shown up to 7-day windows)`;
    }
    const alerts = (await reads.unitAlerts(unit.id, w.fromMs, w.toMs, 1000)).filter((a) => a.kind === 'spread_high' || a.kind === 'spread_jump');
    const events = await reads.events(unit.id, w.fromMs, w.toMs);
    const svg = spreadSvg({
      title: `${unit.name}: exhaust spread`,
      subtitle: `${new Date(w.fromMs).toISOString().slice(0, 16).replace('T', ' ')} to ${new Date(w.toMs).toISOString().slice(0, 16).replace('T', ' ')} UTC · ${what}`,
      temperatureUnit: unit.config.temperatureUnit,
      fromMs: w.fromMs,
      toMs: w.toMs,
      points,
      alerts: alerts.map((a) => ({ tMs: Date.parse(a.raisedAt), grade: a.grade, label: alertLabel(a) })),
      events: events.map((e) => ({ tMs: Date.parse(e.at), label: eventLabel(e) })),
    });
    return reply.header('content-type', svgType).send(svg);
  });
}
