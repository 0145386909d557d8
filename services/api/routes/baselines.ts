/**
 * Baselines of a unit: GET /v1/units/:unitId/baselines (read) lists every version, newest
 * first, with its reference window, method, when and by whom it was fitted, and the load bins
 * of its spread baseline with their counts, and the recent fit requests; POST
 * /v1/units/:unitId/baselines (admin) fits a new version over {from, to} from the steady rings
 * analysed in that window and answers 201 with it, or, when analysis has not yet reached the
 * end of the window, records the request and answers 202: the worker fits it once analysis
 * has passed the window (GET shows the request's state and the version made). Older versions are never changed: alerts and trends keep naming the one they used.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type TSchema } from 'typebox';
import { analysisWatermarkMs, insertBaselineRequest, listBaselineRequests, listBaselines, type BaselineRecord, type BaselineRequestRecord } from '../../db/baselines.ts';
import { BaselineFitError, fitBaseline } from '../../worker/baselines.ts';
import { badRequest, notFound, unprocessable } from '../errors.ts';
import { ErrorReply, UnitParams } from '../schemas.ts';

const Nullable = <T extends TSchema>(t: T) => Type.Union([t, Type.Null()]);
const Time = Type.String({ format: 'date-time' });

const BinReply = Type.Object({
  loFraction: Type.Number({ description: 'corrected load at the bin\'s lower edge, fraction' }),
  hiFraction: Type.Number(),
  count: Type.Integer({ description: 'steady rings in the bin' }),
  fitted: Type.Boolean({ description: 'false: too few rings, "no baseline here"' }),
  spreadMedianDegC: Nullable(Type.Number()),
  spreadHighDegC: Nullable(Type.Number({ description: 'the high quantile the spread limit is built on, °C' })),
});

export const BaselineReply = Type.Object({
  version: Type.Integer(),
  inForce: Type.Boolean({ description: 'the newest version, used for new analysis' }),
  window: Type.Object({ from: Time, to: Time }),
  method: Type.String(),
  fittedAt: Time,
  fittedBy: Type.String(),
  sampleCount: Type.Integer({ description: 'steady rings used' }),
  binWidth: Type.Number(),
  minCount: Type.Integer({ description: 'rings a bin needs to be fitted' }),
  bins: Type.Array(BinReply),
});

export const BaselineRequestReply = Type.Object({
  id: Type.String(),
  window: Type.Object({ from: Time, to: Time }),
  requestedBy: Type.String(),
  requestedAt: Time,
  state: Type.Union([Type.Literal('pending'), Type.Literal('fitted'), Type.Literal('failed')]),
  version: Nullable(Type.Integer({ description: 'the version made, once fitted' })),
  error: Nullable(Type.String({ description: 'why no version could be made' })),
  finishedAt: Nullable(Time),
});

function requestReply(r: BaselineRequestRecord) {
  return {
    id: r.id,
    window: { from: r.windowFrom.toISOString(), to: r.windowTo.toISOString() },
    requestedBy: r.requestedBy,
    requestedAt: r.requestedAt.toISOString(),
    state: r.state,
    version: r.version,
    error: r.error,
    finishedAt: r.finishedAt ? r.finishedAt.toISOString() : null,
  };
}

const FitBody = Type.Object(
  {
    from: Type.String({ format: 'date-time', description: 'start of the reference window' }),
    to: Type.String({ format: 'date-time', description: 'end of the reference window (exclusive)' }),
  },
  { additionalProperties: false },
);

const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply, 422: ErrorReply };

export function baselineReply(b: BaselineRecord, inForce: boolean) {
  const s = b.baseline.spread;
  return {
    version: b.version,
    inForce,
    window: { from: b.windowFrom.toISOString(), to: b.windowTo.toISOString() },
    method: b.method,
    fittedAt: b.fittedAt.toISOString(),
    fittedBy: b.fittedBy,
    sampleCount: b.sampleCount,
    binWidth: s.binWidth,
    minCount: s.minCount,
    bins: s.bins
      .filter((x) => x.count > 0)
      .map((x) => ({
        loFraction: Math.round(x.loFraction * 1e6) / 1e6,
        hiFraction: Math.round(x.hiFraction * 1e6) / 1e6,
        count: x.count,
        fitted: x.median !== null,
        spreadMedianDegC: x.median,
        spreadHighDegC: x.high,
      })),
  };
}

export async function baselineRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();

  app.get('/v1/units/:unitId/baselines', {
    schema: { tags: ['baselines'], summary: 'Baseline versions of a unit, newest first', params: UnitParams, response: { 200: Type.Object({ baselines: Type.Array(BaselineReply), requests: Type.Array(BaselineRequestReply) }), ...errors } },
    config: { access: 'read' },
  }, async (request) => {
    const unitId = request.params.unitId;
    if (!(await app.repos.units.exists(unitId))) throw notFound(`No unit ${unitId}.`);
    const [list, requests] = await Promise.all([listBaselines(app.pool, unitId), listBaselineRequests(app.pool, unitId)]);
    return { baselines: list.map((b, i) => baselineReply(b, i === 0)), requests: requests.map(requestReply) };
  });

  app.post('/v1/units/:unitId/baselines', {
    schema: { tags: ['baselines'], summary: 'Fit a new baseline version over a reference window', params: UnitParams, body: FitBody, response: { 201: BaselineReply, 202: BaselineRequestReply, ...errors } },
    config: { access: 'admin' },
  }, async (request, reply) => {
    const unitId = request.params.unitId;
    if (!(await app.repos.units.exists(unitId))) throw notFound(`No unit ${unitId}.`);
    const from = Date.parse(request.body.from);
    const to = Date.parse(request.body.to);
    if (!(from < to)) throw badRequest(`"from" (${request.body.from}) must be before "to" (${request.body.to}).`);
    const by = request.principal?.label ?? request.principal?.prefix ?? 'unknown';
    const watermark = await analysisWatermarkMs(app.pool, unitId);
    if (watermark === null || watermark < to) {
      const r = await insertBaselineRequest(app.pool, unitId, from, to, by);
      request.log.info({ unitId, requestId: r.id, from: request.body.from, to: request.body.to }, 'baseline fit requested; waiting for analysis to reach the end of the window');
      return reply.status(202).send(requestReply(r));
    }
    try {
      const b = (await fitBaseline(app.pool, unitId, from, to, by, app.appConfig.worker)) as BaselineRecord;
      request.log.info({ unitId, baselineVersion: b.version, from: request.body.from, to: request.body.to }, 'baseline fitted on request');
      return reply.status(201).send(baselineReply(b, true));
    } catch (err) {
      if (err instanceof BaselineFitError) throw unprocessable(`${err.message}.`);
      throw err;
    }
  });
}
