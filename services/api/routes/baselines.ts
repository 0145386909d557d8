/**
 * Baselines of a unit: GET /v1/units/:unitId/baselines (read) lists every version, newest
 * first, with its reference window, method, when and by whom it was fitted, and the load bins
 * of its spread baseline with their counts, and the recent fit requests; POST
 * /v1/units/:unitId/baselines (admin) asks for a new version fitted over {from, to}: it records
 * the request and answers 202 with it (Location: the list, where the request's state and the
 * version made appear). The worker fits it once analysis has passed the window. A window that
 * analysis has passed already and that cannot be fitted (no steady rings, no load bin with
 * enough of them) is refused at once with 422, by the check the worker's fit makes. Older
 * versions are never changed: alerts and trends keep naming the one they used.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type TSchema } from 'typebox';
import { baselineOptionsFor, baselineWindowProblem } from '../../core/baseline.ts';
import { analysisWatermarkMs, insertBaselineRequest, listBaselineRequests, listBaselines, steadyWindowSupply, type BaselineRecord, type BaselineRequestRecord } from '../../db/baselines.ts';
import { badRequest, notFound, unprocessable } from '../../http/errors.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { UnitParams } from '../schemas.ts';

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
    schema: {
      tags: ['baselines'],
      summary: 'Fit a new baseline version over a reference window',
      description: 'Records the request and answers 202 with it; the worker fits the new version once analysis has passed the window. Watch the request (its state, then the version made) in GET /v1/units/{unitId}/baselines, named by the Location header.',
      params: UnitParams,
      body: FitBody,
      response: { 202: BaselineRequestReply, ...errors },
    },
    config: { access: 'admin' },
  }, async (request, reply) => {
    const unitId = request.params.unitId;
    if (!(await app.repos.units.exists(unitId))) throw notFound(`No unit ${unitId}.`);
    const from = Date.parse(request.body.from);
    const to = Date.parse(request.body.to);
    if (!(from < to)) throw badRequest(`"from" (${request.body.from}) must be before "to" (${request.body.to}).`);
    const by = request.principal?.label ?? request.principal?.keyId ?? 'unknown';
    const watermark = await analysisWatermarkMs(app.pool, unitId);
    const analysed = watermark !== null && watermark >= to;
    if (analysed) {
      const options = baselineOptionsFor(app.appConfig.worker);
      const problem = baselineWindowProblem(unitId, from, to, await steadyWindowSupply(app.pool, unitId, from, to, options), options.minCount);
      if (problem) throw unprocessable(`${problem}.`);
    }
    const r = await insertBaselineRequest(app.pool, unitId, from, to, by);
    request.log.info({ unitId, requestId: r.id, from: request.body.from, to: request.body.to }, analysed ? 'baseline fit requested' : 'baseline fit requested; waiting for analysis to reach the end of the window');
    return reply.status(202).header('location', `/v1/units/${unitId}/baselines`).send(requestReply(r));
  });
}
