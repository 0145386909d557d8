/**
 * GET /v1/units/:unitId/status (read): the latest analysis of a unit (the time of the latest
 * analysed ring, or null before the first; the latest stored ring), its exhaust spreads and
 * limit, coldest and hottest thermocouples, chamber estimates with the swirl used, invalid
 * thermocouples with their reasons, the active alerts, and how far analysis has come (rings
 * stored and analysed, the watermark, the worker holding the unit). One statement reads it all,
 * for all the units asked for at once; the serialized reply is kept per unit and given again
 * while the database's commit snapshot says nothing has been written since.
 * Also `workerRoutes`: this route and the baselines routes, registered together.
 */
import DataLoader from 'dataloader';
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type Static, type TSchema } from 'typebox';
import { ADVISORY_CAUTION } from '../../core/findings.ts';
import { judgement } from '../../core/judgement.ts';
import { chamberNotObservableReason } from '../../core/ring.ts';
import { noWorstChamberReason } from '../../core/worst-chamber.ts';
import { VALIDITY_REASONS } from '../../core/types.ts';
import { unitStatusStates, type UnitStatusState } from '../../db/status-reads.ts';
import { notFound } from '../../http/errors.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { NotJudgedList, UnitParams, type JudgementSettings } from '../schemas.ts';
import { baselineRoutes } from './baselines.ts';
import { snapshotOf } from './read-common.ts';
import { StartCounters } from './starts.ts';

const Nullable = <T extends TSchema>(t: T) => Type.Union([t, Type.Null()]);
const DegC = (description: string) => Nullable(Type.Number({ description: `${description}, °C` }));

export const StatusReply = Type.Object({
  unitId: Type.String(),
  ts: Nullable(Type.String({ format: 'date-time', description: 'time of the latest analysed ring; null before the first' })),
  lastRingTs: Nullable(Type.String({ format: 'date-time', description: 'time of the latest stored ring' })),
  loadFraction: Nullable(Type.Number({ description: 'corrected load, fraction of the ISO rating' })),
  steady: Type.Boolean(),
  spread: DegC('hottest − coldest valid thermocouple'),
  spreadExcl1: DegC('hottest − second coldest'),
  spreadExcl2: DegC('hottest − third coldest'),
  limit: DegC('spread limit at this load'),
  limitFromBaseline: Type.Boolean({ description: 'false: the default limit (no baseline at this load yet)' }),
  ringMean: DegC('mean of the valid thermocouples'),
  hottestThermocouple: Nullable(Type.Integer({ description: 'numbered from 1' })),
  coldestThermocouple: Nullable(Type.Integer({ description: 'numbered from 1' })),
  secondColdestThermocouple: Nullable(Type.Integer({ description: 'numbered from 1' })),
  coldestAdjacent: Type.Boolean({ description: 'the two coldest are neighbours (a chamber rather than a sensor)' }),
  coverage: Type.Object({ valid: Type.Integer(), total: Type.Integer(), degraded: Type.Boolean() }),
  swirlDeg: Nullable(Type.Number({ description: 'swirl angle used to map the ring to chambers, degrees' })),
  chambers: Type.Array(
    Type.Object({
      chamber: Type.Integer({ description: 'numbered from 1' }),
      deviationDegC: Nullable(Type.Number({ description: 'from the average chamber, °C' })),
      uncertaintyDegC: Nullable(Type.Number({ description: 'one σ, °C' })),
      observable: Type.Boolean({ description: 'false: no estimate of this chamber in the latest ring (no valid thermocouple under its plume, or too few for a map); its figures are null, not a healthy 0' }),
      notObservableReason: Nullable(Type.String({ description: 'why the chamber is not observable; null when it is' })),
      residualDegC: Nullable(Type.Number({ description: 'deviation − baseline at this load, °C (steady rings with a baseline)' })),
    }),
  ),
  worstChamber: Nullable(
    Type.Object({
      chamber: Type.Integer({ description: 'the chamber departing most from its normal at this load, numbered from 1: the chamber of the ring\'s most severe chamber finding when there is one' }),
      likelihood: Nullable(Type.Number({ description: 'probability, 0–1, that it is the chamber departing most, from the chamber residuals (faulty thermocouples left out) and their scatter: a healthy ring names none with a high likelihood' })),
      runnerUpChamber: Nullable(Type.Integer({ description: 'the next most likely chamber' })),
      runnerUpLikelihood: Nullable(Type.Number()),
    }, { description: 'null when no chamber is judged: see worstChamberReason' }),
  ),
  worstChamberReason: Nullable(Type.String({ description: 'why worstChamber is null (no ring analysed, not at steady load, no baseline at this load, too few thermocouples to map the chambers); null when a chamber is named' })),
  invalidThermocouples: Type.Array(Type.Object({ thermocouple: Type.Integer({ description: 'numbered from 1' }), reason: Type.String() })),
  configVersion: Nullable(Type.Integer()),
  baselineVersion: Nullable(Type.Integer({ description: 'baseline version the limit and residuals used' })),
  activeAlerts: Type.Array(Type.Object({}, { additionalProperties: true, description: 'as the items of GET /v1/alerts' })),
  progress: Type.Object({
    ringsStored: Type.Integer(),
    ringsAnalysed: Type.Integer(),
    ringsPending: Type.Integer({ description: 'stored − analysed' }),
    lateRingsAnalysed: Type.Integer({ description: 'rings analysed after others later than them' }),
    watermarkTs: Nullable(Type.String({ format: 'date-time', description: 'analysis is complete up to here, in ring order' })),
    workerId: Nullable(Type.String()),
    leaseUntil: Nullable(Type.String({ format: 'date-time' })),
    reanalysis: Nullable(
      Type.Object(
        {
          fromTs: Nullable(Type.String({ format: 'date-time', description: 'ring time the rings are judged again from' })),
          toTs: Nullable(Type.String({ format: 'date-time', description: 'up to here (the watermark when it began); watermarkTs says how far it has come' })),
          ringsLeft: Type.Integer({ description: 'rings still to be judged again' }),
          askedFromTs: Nullable(Type.String({ format: 'date-time', description: 'a re-analysis asked for from this ring time, not begun yet' })),
        },
        { description: 'rings judged again because a baseline or configuration version took effect in the past; null when none' },
      ),
    ),
  }),
  starts: StartCounters,
  notJudged: NotJudgedList,
  baselineDueTs: Nullable(Type.String({ format: 'date-time', description: 'ring time at which the automatic first baseline falls due (the unit has none yet), else null' })),
  baselineCaution: Nullable(Type.String({ description: 'fuel nozzles worked on, a combustion inspection or combustor tuning since the baseline in force was learnt: the rings are judged on the baseline from before the work, not as drift, until a new one is fitted (when, said here); null when none' })),
  caution: Type.String(),
});

const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply };
const iso = (d: Date | null) => (d ? d.toISOString() : null);
const num = (v: number | null | undefined) => (v === null || v === undefined || !Number.isFinite(v) ? null : v);

/** What GET /v1/units/:unitId/status promises about how fresh it is. */
export const STATUS_FRESHNESS = 'Every read reflects every ring analysed, alert action and start counted that was committed before it.';

type StatusBody = Static<typeof StatusReply>;

/** The reply body from what the status statement read. */
export function statusBody(unitId: string, st: UnitStatusState, settings: JudgementSettings): StatusBody {
  const a = st.analysis;
  const p = st.progress;
  const judged = judgement({
    unitId,
    ringsStored: p.ringsStored,
    ringsAnalysed: p.ringsAnalysed,
    watermarkMs: p.watermarkTs?.getTime() ?? null,
    latest: a ? { steady: a.steady, limitFromBaseline: a.limitFromBaseline, baselineVersion: a.baselineVersion, loadFraction: a.loadFraction } : null,
    baselineVersion: st.baseline.version,
    firstSteadyMs: st.baseline.firstSteadyMs,
    pendingRequest: st.baseline.pendingRequest,
    baselineAutoDays: settings.baselineAutoDays,
    baselineInForceFromMs: st.baseline.inForceFromMs,
    periods: st.baseline.periods,
  });
  const validity = a?.validity ?? [];
  return {
    unitId,
    ts: iso(a?.ts ?? null),
    lastRingTs: iso(p.lastRingTs),
    loadFraction: num(a?.loadFraction),
    steady: a?.steady ?? false,
    spread: num(a?.spread),
    spreadExcl1: num(a?.spreadExcl1),
    spreadExcl2: num(a?.spreadExcl2),
    limit: num(a?.spreadLimit),
    limitFromBaseline: a?.limitFromBaseline ?? false,
    ringMean: num(a?.ringMean),
    hottestThermocouple: a?.hottestTc ?? null,
    coldestThermocouple: a?.coldestTc ?? null,
    secondColdestThermocouple: a?.secondColdestTc ?? null,
    coldestAdjacent: a?.coldestAdjacent ?? false,
    coverage: { valid: a?.validCount ?? 0, total: validity.length, degraded: a?.coverageDegraded ?? false },
    swirlDeg: num(a?.swirlDeg),
    chambers: (a?.chamberDeviation ?? []).map((d, k) => {
      const blind = chamberNotObservableReason(a!.chamberDeviation, k);
      return {
        chamber: k + 1,
        deviationDegC: num(d),
        uncertaintyDegC: blind ? null : num(a?.chamberUncertainty[k]),
        observable: blind === null,
        notObservableReason: blind,
        residualDegC: num(a?.chamberResidual?.[k]),
      };
    }),
    worstChamber:
      a && a.worstChamber !== null
        ? { chamber: a.worstChamber, likelihood: num(a.worstLikelihood), runnerUpChamber: a.runnerUpChamber, runnerUpLikelihood: num(a.runnerUpLikelihood) }
        : null,
    worstChamberReason: noWorstChamberReason(a ? { worstChamber: a.worstChamber, steady: a.steady, baselineVersion: a.baselineVersion, chamberResidual: a.chamberResidual } : null),
    invalidThermocouples: validity.flatMap((code, i) => (code === 0 ? [] : [{ thermocouple: i + 1, reason: VALIDITY_REASONS[code] ?? 'missing' }])),
    configVersion: a?.configVersion ?? null,
    baselineVersion: a?.baselineVersion ?? null,
    activeAlerts: st.alerts as unknown as Record<string, unknown>[],
    progress: {
      ringsStored: p.ringsStored,
      ringsAnalysed: p.ringsAnalysed,
      ringsPending: Math.max(0, p.ringsStored - p.ringsAnalysed),
      lateRingsAnalysed: p.lateRingsAnalysed,
      watermarkTs: iso(p.watermarkTs),
      workerId: p.workerId,
      leaseUntil: iso(p.leaseUntil),
      reanalysis: p.reanalysis ? { fromTs: iso(p.reanalysis.fromTs), toTs: iso(p.reanalysis.toTs), ringsLeft: p.reanalysis.ringsLeft, askedFromTs: iso(p.reanalysis.askedFromTs) } : null,
    },
    starts: st.starts,
    notJudged: judged.notJudged,
    baselineDueTs: judged.baselineDueMs === null ? null : new Date(judged.baselineDueMs).toISOString(),
    baselineCaution: judged.baselineCaution,
    caution: ADVISORY_CAUTION,
  };
}

/** Units whose status is kept serialized; past this the cache starts again empty. */
const STATUS_CACHE_UNITS = 20_000;
/** Most units read by one status statement. */
const STATUS_BATCH_UNITS = 100;

export async function statusRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const snapshot = snapshotOf(app);
  // The serialized status of each unit asked for, with the commit snapshot it was read at. A
  // request reads the database's commit snapshot (one trivial query, shared by the requests
  // that arrive while one is under way); while it equals the entry's, nothing has been written
  // since and the bytes are exact. A shelf running out ends an entry at that instant. Otherwise
  // the status is read again: the units missed by the requests of one turn of the event loop
  // are read together in one statement (a board of units opened at once, or every unit after a
  // write, costs a statement per turn, not one per unit). A batch is sent after every request
  // in it asked, so each reads what was committed before it asked.
  interface Entry { snapshot: string; validUntilMs: number; body: Buffer }
  const cache = new Map<string, Entry>();
  const loader = new DataLoader<string, UnitStatusState | null>(
    async (unitIds) => {
      const states = await unitStatusStates(app.pool, [...new Set(unitIds)], Date.now());
      return unitIds.map((id) => states.get(id) ?? null);
    },
    { cache: false, maxBatchSize: STATUS_BATCH_UNITS, batchScheduleFn: (send) => setImmediate(send) },
  );

  app.get('/v1/units/:unitId/status', {
    schema: {
      tags: ['analysis'],
      summary: 'Latest analysis of a unit, its active alerts and how far analysis has come',
      description: STATUS_FRESHNESS,
      params: UnitParams,
      response: { 200: StatusReply, ...errors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unitId = request.params.unitId;
    const snap = await snapshot();
    let e = cache.get(unitId);
    if (!e || e.snapshot !== snap || Date.now() >= e.validUntilMs) {
      const st = await loader.load(unitId);
      if (!st) {
        cache.delete(unitId);
        throw notFound(`No unit ${unitId}.`);
      }
      e = cache.get(unitId);
      // Requests sharing one read serialize it once.
      if (!e || e.snapshot !== st.snapshot || e.validUntilMs !== (st.changesAtMs ?? Infinity)) {
        if (cache.size >= STATUS_CACHE_UNITS) cache.clear();
        e = { snapshot: st.snapshot, validUntilMs: st.changesAtMs ?? Infinity, body: Buffer.from(reply.serialize(statusBody(unitId, st, app.appConfig.worker)) as string) };
        cache.set(unitId, e);
      }
    }
    return reply.header('content-type', 'application/json; charset=utf-8').send(e.body as never);
  });
}

/** The routes backed by the worker's tables: status and baselines. */
export async function workerRoutes(app: FastifyInstance): Promise<void> {
  await app.register(statusRoutes);
  await app.register(baselineRoutes);
}
