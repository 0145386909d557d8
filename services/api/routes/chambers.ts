/**
 * Chambers of a unit: GET /v1/units/:unitId/chambers (per chamber: where it sits and where its
 * plume lands now, its current deviation and residual, drift rate with interval, CUSUM state,
 * the baseline version, and its worst active alert) and GET /v1/units/:unitId/chambers/:chamber/trend
 * (residual aggregates over time, hourly or daily from the rollups).
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type Static } from 'typebox';
import { chamberAnglesDeg, chamberNotObservableReason, plumeAngleDeg } from '../../core/index.ts';
import type { UnitConfig } from '../../core/types.ts';
import type { AlertSummary, DriftStateRecord, Grade, ReadsRepository, StoredAnalysis } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import { notFound } from '../../http/errors.ts';
import { NotJudgedList, UnitId, type JudgementSettings } from '../schemas.ts';
import { DAY_MS, Window, fin, notJudgedOf, readErrors, readWindow, readsOf, timeWindow, unitOr404 } from './read-common.ts';

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);
const GradeT = Type.Union([Type.Literal('notice'), Type.Literal('warning'), Type.Literal('alarm'), Type.Literal('critical')]);

export const ChamberRow = Type.Object({
  chamber: Type.Integer({ description: 'numbered from 1' }),
  angleDeg: Type.Number({ description: 'where the chamber sits on the casing' }),
  plumeAngleDeg: Nullable(Type.Number({ description: 'where its plume lands on the thermocouple ring at the latest corrected load (after swirl)' })),
  deviationC: Nullable(Type.Number({ description: 'latest ring: chamber estimate minus the average chamber, °C' })),
  uncertaintyC: Nullable(Type.Number({ description: 'one-sigma uncertainty of the estimate, °C' })),
  observable: Type.Boolean({ description: 'false: the latest ring has no estimate of this chamber (no valid thermocouple under its plume, or too few for a map, or no ring analysed); deviationC and uncertaintyC are then null, not a healthy 0' }),
  notObservableReason: Nullable(Type.String({ description: 'why the chamber is not observable; null when it is' })),
  residualC: Nullable(Type.Number({ description: 'deviation minus its baseline at the same corrected load (latest steady ring, else the latest daily value), °C' })),
  driftCPer30d: Nullable(Type.Number()),
  driftIntervalCPer30d: Nullable(Type.Tuple([Type.Number(), Type.Number()], { description: '95 % interval of the drift rate' })),
  driftCPer1000h: Nullable(Type.Number({ description: 'per 1000 fired hours' })),
  driftSignificant: Type.Boolean(),
  driftDays: Type.Integer({ description: 'daily aggregates behind the drift rate' }),
  cusum: Nullable(Type.Object({ upper: Type.Number(), lower: Type.Number(), h: Type.Number(), signal: Nullable(Type.Union([Type.Literal('up'), Type.Literal('down')])) })),
  sigmaC: Nullable(Type.Number({ description: 'robust scale of the daily residual, °C' })),
  baselineVersion: Nullable(Type.Integer()),
  activeGrade: Nullable(GradeT),
  likelihoodWorst: Nullable(Type.Number({ description: 'when this is the worst chamber of the latest ring: the probability, 0–1, that it is the chamber departing most from its normal (a healthy ring names none with a high likelihood)' })),
});
export type ChamberRow = Static<typeof ChamberRow>;

export const ChambersReply = Type.Object({
  unitId: Type.String(),
  ts: Nullable(Type.String({ description: 'latest analysed ring' })),
  loadFraction: Nullable(Type.Number()),
  swirlDeg: Nullable(Type.Number()),
  baselineVersion: Nullable(Type.Integer()),
  worstChamber: Nullable(Type.Integer()),
  runnerUpChamber: Nullable(Type.Integer()),
  runnerUpLikelihood: Nullable(Type.Number()),
  chambers: Type.Array(ChamberRow),
  notJudged: NotJudgedList,
  baselineDueTs: Nullable(Type.String({ format: 'date-time', description: 'ring time at which the automatic first baseline falls due, while the unit has none' })),
});

const GRADE_RANK: Record<Grade, number> = { notice: 0, warning: 1, alarm: 2, critical: 3 };

export function worstGradeOf(alerts: AlertSummary[], pick: (a: AlertSummary) => boolean, nowMs: number): Grade | null {
  let best: Grade | null = null;
  for (const a of alerts) {
    if (!a.active || !pick(a)) continue;
    if (a.shelvedUntil && Date.parse(a.shelvedUntil) > nowMs) continue;
    if (best === null || GRADE_RANK[a.grade] > GRADE_RANK[best]) best = a.grade;
  }
  return best;
}

/** The configuration a stored analysis was made with (falls back to the one in force now). */
export function configOf(unit: UnitRecord, a: StoredAnalysis | null): UnitConfig {
  if (!a) return unit.config;
  return unit.versions.find((v) => v.version === a.configVersion)?.config ?? unit.config;
}

export function cusumOf(d: DriftStateRecord | undefined) {
  if (!d || !d.cusum) return null;
  const { upper, lower, h } = d.cusum;
  return { upper, lower, h, signal: upper > h ? ('up' as const) : lower > h ? ('down' as const) : null };
}

/** Everything the chamber table needs, from the latest analysis, the drift state and open alerts. */
export async function chamberFigures(reads: ReadsRepository, unit: UnitRecord, nowMs: number, settings: JudgementSettings) {
  const [latest, drift, alerts] = await Promise.all([
    reads.analysisNear(unit.id, null),
    reads.driftStates(unit.id, 'chamber'),
    reads.unitAlerts(unit.id, nowMs, nowMs, 500),
  ]);
  const config = configOf(unit, latest);
  const angles = chamberAnglesDeg(config);
  const load = latest?.loadFraction ?? null;
  const byIdx = new Map(drift.map((d) => [d.index, d]));
  const chambers: ChamberRow[] = Array.from(angles, (angle, k) => {
    const d = byIdx.get(k + 1);
    const res = latest?.chamberResidualC?.[k];
    const blind = latest ? chamberNotObservableReason(latest.chamberDeviationC, k) : 'not observable: no ring analysed yet';
    return {
      chamber: k + 1,
      angleDeg: angle,
      plumeAngleDeg: load === null ? null : plumeAngleDeg(config, k, load),
      deviationC: fin(latest?.chamberDeviationC[k]),
      uncertaintyC: blind ? null : fin(latest?.chamberUncertaintyC[k]),
      observable: blind === null,
      notObservableReason: blind,
      // A chamber not observable in the latest ring has no residual of it either (the daily value is older).
      residualC: blind && latest ? null : fin(res ?? d?.lastValueC),
      driftCPer30d: fin(d?.rate?.per30DaysDegC),
      driftIntervalCPer30d: d?.rate?.per30DaysInterval && d.rate.per30DaysInterval.every(Number.isFinite) ? d.rate.per30DaysInterval : null,
      driftCPer1000h: fin(d?.rate?.per1000FiredHoursDegC),
      driftSignificant: Boolean(d?.rate?.significant),
      driftDays: d?.days ?? 0,
      cusum: cusumOf(d),
      sigmaC: fin(d?.sigmaC),
      baselineVersion: d?.baselineVersion ?? latest?.baselineVersion ?? null,
      activeGrade: worstGradeOf(alerts, (a) => a.chamber === k + 1, nowMs),
      likelihoodWorst: latest?.worstChamber === k + 1 ? fin(latest.worstLikelihood) : null,
    };
  });
  return { latest, config, chambers, alerts, ...(await notJudgedOf(reads, unit.id, latest, settings, drift.length)) };
}

export const ChamberParams = Type.Object({ unitId: UnitId, chamber: Type.Integer({ minimum: 1, maximum: 64, description: 'numbered from 1' }) });

export const TrendPoint = Type.Object({
  ts: Type.String({ description: 'bucket start' }),
  n: Type.Integer({ description: 'steady rings with a residual' }),
  meanC: Nullable(Type.Number()),
  sdC: Nullable(Type.Number()),
  minC: Nullable(Type.Number()),
  maxC: Nullable(Type.Number()),
});

export const TrendReply = Type.Object({
  unitId: Type.String(),
  chamber: Type.Integer(),
  from: Type.String(),
  to: Type.String(),
  every: Type.Union([Type.Literal('1h'), Type.Literal('1d')]),
  baselineVersion: Nullable(Type.Integer()),
  points: Type.Array(TrendPoint),
});

/** Trend windows: up to 3700 days; hourly buckets up to 31 days, daily beyond. */
export const TREND_MAX_DAYS = 3700;
export const TREND_HOURLY_MAX_DAYS = 31;

/** Residual aggregates of one chamber (or thermocouple) from the rollups. */
export async function residualTrend(reads: ReadsRepository, unitId: string, metric: 'chamber_residual' | 'tc_residual' | 'chamber_deviation' | 'tc_deviation', subject: number, fromMs: number, toMs: number, every?: '1h' | '1d') {
  const span = (toMs - fromMs) / DAY_MS;
  const e = every ?? (span <= TREND_HOURLY_MAX_DAYS ? '1h' : '1d');
  const rows = await reads.rollupSeries(unitId, e === '1h' ? 'hour' : 'day', fromMs, toMs, [metric], subject);
  const points = rows
    .filter((r) => r.n[0] > 0)
    .map((r) => ({ ts: new Date(r.bucketMs).toISOString(), n: r.n[0], meanC: fin(r.mean[0]), sdC: fin(r.sd[0]), minC: fin(r.min[0]), maxC: fin(r.max[0]) }));
  return { every: e, points };
}

export async function chamberRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.get('/v1/units/:unitId/chambers', {
    schema: { tags: ['read'], summary: 'Per chamber: residual, drift rate with interval, CUSUM state, baseline version', params: Type.Object({ unitId: UnitId }), response: { 200: ChambersReply, ...readErrors } },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const { latest, chambers, notJudged, baselineDueTs } = await chamberFigures(reads, unit, Date.now(), app.appConfig.worker);
    return {
      unitId: unit.id,
      ts: latest?.ts ?? null,
      loadFraction: fin(latest?.loadFraction),
      swirlDeg: fin(latest?.swirlDeg),
      baselineVersion: latest?.baselineVersion ?? null,
      worstChamber: latest?.worstChamber ?? null,
      runnerUpChamber: latest?.runnerUpChamber ?? null,
      runnerUpLikelihood: fin(latest?.runnerUpLikelihood),
      chambers,
      notJudged,
      baselineDueTs,
    };
  });

  app.get('/v1/units/:unitId/chambers/:chamber/trend', {
    schema: {
      tags: ['read'],
      summary: 'Residual aggregates of one chamber over time (hourly up to 31 days, daily beyond; at most 3700 days)',
      params: ChamberParams,
      querystring: Type.Object({ ...Window, every: Type.Optional(Type.Union([Type.Literal('1h'), Type.Literal('1d')], { description: 'bucket: hourly or daily aggregates; default hourly up to 31 days, daily beyond' })) }, { additionalProperties: false }),
      response: { 200: TrendReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const k = request.params.chamber;
    if (k > unit.config.chambers.count) throw notFound(`Unit ${unit.id} has ${unit.config.chambers.count} chambers; chamber ${k} does not exist (chambers are numbered from 1).`);
    const every = request.query.every;
    const w = await readWindow(reads, unit.id, request.query, 90, every === '1h' ? 400 : TREND_MAX_DAYS, every === '1h' ? 'An hourly trend' : 'A chamber trend', reply);
    const latest = await reads.latestBaseline(unit.id);
    const t = await residualTrend(reads, unit.id, 'chamber_residual', k, w.fromMs, w.toMs, every);
    return { unitId: unit.id, chamber: k, from: new Date(w.fromMs).toISOString(), to: new Date(w.toMs).toISOString(), every: t.every, baselineVersion: latest?.version ?? null, points: t.points };
  });
}
