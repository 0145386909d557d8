/**
 * GET /v1/units/:unitId/analysis?from&to&every=1m|1h|1d — the unit's analysis as a time series
 * of buckets (count of rings, and mean / min / max of corrected load, exhaust spread, spread
 * without the coldest one and two, ring mean and valid thermocouples). Hourly and daily
 * buckets come from the worker's rollups; one-minute buckets from the analysed rings
 * themselves, so that resolution is limited to 7 days per request (hourly 400, daily 3700).
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { UNIT_SERIES_COLUMNS, type SeriesBucket } from '../../db/reads.ts';
import { UnitId } from '../schemas.ts';
import { WINDOW_LIMIT_DAYS, Window, fin, readErrors, readWindow, readsOf, timeWindow, unitOr404, type Resolution } from './read-common.ts';

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);
const Stat = Type.Object({ mean: Nullable(Type.Number()), min: Nullable(Type.Number()), max: Nullable(Type.Number()) });

const FIGURES = Object.keys(UNIT_SERIES_COLUMNS) as Array<keyof typeof UNIT_SERIES_COLUMNS>;

export const AnalysisBucket = Type.Object({
  ts: Type.String({ description: 'bucket start' }),
  rings: Type.Integer({ description: 'analysed rings in the bucket' }),
  loadFraction: Stat,
  spreadC: Stat,
  spreadExcl1C: Stat,
  spreadExcl2C: Stat,
  spreadLimitC: Stat,
  ringMeanC: Stat,
  validCount: Stat,
});

export const AnalysisReply = Type.Object({
  unitId: Type.String(),
  from: Type.String(),
  to: Type.String(),
  every: Type.Union([Type.Literal('1m'), Type.Literal('1h'), Type.Literal('1d')]),
  source: Type.Union([Type.Literal('rings'), Type.Literal('rollups')]),
  buckets: Type.Array(AnalysisBucket),
});

const BUCKET_S: Record<Resolution, number> = { '1m': 60, '1h': 3600, '1d': 86400 };
/** Rollup metric behind each figure (figures without one are null in rollup buckets). */
const ROLLUP_OF: Partial<Record<(typeof FIGURES)[number], string>> = {
  loadFraction: 'load_fraction',
  spreadC: 'spread',
  spreadExcl1C: 'spread_excl1',
  spreadExcl2C: 'spread_excl2',
  ringMeanC: 'ring_mean',
};

const EMPTY = { mean: null, min: null, max: null };

export async function analysisRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.get('/v1/units/:unitId/analysis', {
    schema: {
      tags: ['read'],
      summary: 'Time series of the unit\'s analysis in buckets of a minute, an hour or a day',
      description: 'Windows are limited per resolution: 1m up to 7 days (from the analysed rings), 1h up to 400 days and 1d up to 3700 days (from the rollups). Default window (without from and to): the last day at 1m, 30 days at 1h, a year at 1d, ending at the last ring of the unit; the x-cansight-window header says which window was used.',
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object({ ...Window, every: Type.Optional(Type.Union([Type.Literal('1m'), Type.Literal('1h'), Type.Literal('1d')], { default: '1h', description: 'resolution: 1m (the analysed rings, in one-minute buckets), 1h or 1d (aggregates)' })) }, { additionalProperties: false }),
      response: { 200: AnalysisReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const every: Resolution = request.query.every ?? '1h';
    const defaultDays = every === '1m' ? 1 : every === '1h' ? 30 : 365;
    const w = await readWindow(reads, unit.id, request.query, defaultDays, WINDOW_LIMIT_DAYS[every], every === '1m' ? 'One-minute resolution (read from the analysed rings)' : every === '1h' ? 'Hourly resolution' : 'Daily resolution', reply);
    let buckets: SeriesBucket[];
    let source: 'rings' | 'rollups';
    if (every === '1m') {
      source = 'rings';
      buckets = await reads.rawSeries(unit.id, w.fromMs, w.toMs, BUCKET_S[every], 7 * 1440 + 1);
    } else {
      source = 'rollups';
      const metrics = Object.values(ROLLUP_OF);
      const rows = await reads.rollupSeries(unit.id, every === '1h' ? 'hour' : 'day', w.fromMs, w.toMs, metrics);
      const byBucket = new Map<number, SeriesBucket>();
      for (const r of rows) {
        let b = byBucket.get(r.bucketMs);
        if (!b) byBucket.set(r.bucketMs, (b = { ts: new Date(r.bucketMs).toISOString(), rings: 0, steady: 0, figures: {} }));
        const figure = FIGURES.find((f) => ROLLUP_OF[f] === r.metric);
        if (!figure) continue;
        b.figures[figure] = { mean: fin(r.mean[0]), min: fin(r.min[0]), max: fin(r.max[0]) };
        if (r.metric === 'spread' || r.metric === 'load_fraction') b.rings = Math.max(b.rings, r.n[0] ?? 0);
      }
      buckets = [...byBucket.values()];
    }
    return {
      unitId: unit.id,
      from: new Date(w.fromMs).toISOString(),
      to: new Date(w.toMs).toISOString(),
      every,
      source,
      buckets: buckets.map((b) => ({ ts: b.ts, rings: b.rings, ...Object.fromEntries(FIGURES.map((f) => [f, b.figures[f] ?? EMPTY])) }) as never),
    };
  });
}
