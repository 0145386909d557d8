/**
 * Starts of a unit (read): GET /v1/units/:unitId/starts?from&to (newest first, with the unit's
 * start counters), GET /v1/units/:unitId/starts/trend.svg?from&to (crossfire completion time and
 * spread at full speed no load, start by start), GET /v1/units/:unitId/starts/:startId (phase
 * timeline, crossfire completion time, per-chamber lighting, findings) and
 * GET /v1/units/:unitId/starts/:startId/start.svg (speed, fuel, spread and chamber estimates
 * against time, phases shaded). Everything here is
 * written by the worker's start detector; SQL is in services/db/starts.ts.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type TSchema } from 'typebox';
import { ADVISORY_CAUTION } from '../../core/findings.ts';
import { START_OUTCOMES, START_PHASES, type StartOutcome, type StartPhase } from '../../core/starts.ts';
import { createStartsRepository, type StartsRepository } from '../../db/starts.ts';
import { notFound } from '../../http/errors.ts';
import { UnitId } from '../schemas.ts';
import { startSvg } from '../svg/start.ts';
import { startTrendSvg } from '../svg/start-trend.ts';
import { Window, readErrors, readWindow, readsOf, timeWindow, unitOr404 } from './read-common.ts';

const Nullable = <T extends TSchema>(t: T) => Type.Union([t, Type.Null()]);
const Time = Type.String({ format: 'date-time' });
const Phase = Type.Unsafe<StartPhase>(Type.String({ enum: [...START_PHASES], description: 'cranking, firing, flame_established, warm_up, acceleration, starter_disengaged, full_speed_no_load, synchronised, loading' }));
const Outcome = Type.Unsafe<StartOutcome>(Type.String({
  enum: [...START_OUTCOMES],
  description: 'completed; failed_to_fire (fuel on, no flame); flame_lost_in_warmup; aborted (stopped after warm-up, before synchronising); tripped_from_load (completed, and its run later ended in a trip)',
}));

/** Default and longest window of the start list, days. */
const LIST_DEFAULT_DAYS = 90;
const LIST_MAX_DAYS = 3700;
const LIST_LIMIT = 2000;

const StartParams = Type.Object({ unitId: UnitId, startId: Type.String({ pattern: '^start-[0-9TZ]{16}$', description: 'as listed, e.g. start-20260301T061512Z' }) });

const PhaseRow = Type.Object({
  phase: Phase,
  startAt: Time,
  durationS: Nullable(Type.Number({ description: 'seconds until the next phase or the end of the start' })),
  speedPct: Nullable(Type.Number({ description: 'shaft speed at the start of the phase, %' })),
});

/** A unit's start counters, as the starts list, the unit status and the fleet rows carry them. */
export const StartCounters = Type.Object({
  firedStarts: Type.Integer({ description: 'starts in which a flame was established' }),
  failedStarts: Type.Integer({ description: 'failed to fire, flame lost in warm-up, or aborted' }),
  trips: Type.Integer({ description: 'fired shutdowns at speed (not counting starts aborted before full speed)' }),
  firedHours: Type.Number({ description: 'hours with flame' }),
  lastStartAt: Nullable(Time),
  lastStartOutcome: Nullable(Outcome),
});

const summaryProps = {
  startId: Type.String(),
  crankAt: Time,
  endAt: Type.String({ format: 'date-time', description: 'when the start was over: loaded, failed or stopped' }),
  outcome: Outcome,
  stoppedIn: Nullable(Phase),
  phases: Type.Array(PhaseRow),
  firingSpeedPct: Nullable(Type.Number({ description: 'shaft speed when the fuel came on, % (common practice: about 20 %)' })),
  starterOffSpeedPct: Nullable(Type.Number({ description: 'speed where the starter drop-out was marked, % (the configured drop-out speed; rings carry no starter signal)' })),
  firingFuelKgS: Nullable(Type.Number()),
  warmupFuelKgS: Nullable(Type.Number({ description: 'common practice: about half the firing flow' })),
  crossfireCompleteS: Nullable(Type.Number({ description: 'seconds from flame established until every chamber was lit and the ring uniform; null when it never was' })),
  spreadEndOfWarmupC: Nullable(Type.Number({ description: 'exhaust spread near the end of warm-up, °C' })),
  spreadFsnlC: Nullable(Type.Number({ description: 'exhaust spread at full speed no load (median), °C' })),
  runEndAt: Nullable(Time),
  runEndedBy: Nullable(Type.Union([Type.Literal('stop'), Type.Literal('trip')])),
  findingKinds: Type.Array(Type.String()),
  unlitChambers: Type.Array(Type.Integer({ description: 'numbered from 1' })),
};

const StartSummary = Type.Object(summaryProps);

const FindingSchema = Type.Object({
  kind: Type.Union([Type.Literal('chamber_unlit'), Type.Literal('start_failed')]),
  grade: Type.Union([Type.Literal('notice'), Type.Literal('warning'), Type.Literal('alarm'), Type.Literal('critical')]),
  chamber: Nullable(Type.Integer({ description: 'numbered from 1' })),
  thermocouple: Nullable(Type.Integer()),
  likelihood: Nullable(Type.Number()),
  runnerUpChamber: Nullable(Type.Integer({ description: 'numbered from 1' })),
  runnerUpLikelihood: Nullable(Type.Number()),
  evidence: Type.Object({}, { additionalProperties: true }),
  baselineVersion: Nullable(Type.Integer()),
  message: Type.String(),
  advice: Type.String(),
});

const StartDetailReply = Type.Object({
  unitId: Type.String(),
  ...summaryProps,
  flameSource: Nullable(Type.Union([Type.Literal('detector'), Type.Literal('exhaust')], { description: 'flame detectors, or the exhaust rise when none are sent' })),
  maxGapS: Type.Number({ description: 'longest gap between rings during the start, s' }),
  configVersion: Nullable(Type.Integer()),
  lighting: Nullable(
    Type.Object({
      swirlDeg: Type.Number({ description: 'start-up swirl used for the chamber estimates, degrees' }),
      windowEndAt: Type.String({ format: 'date-time', description: 'lighting followed from flame established to here (end of warm-up, or where the start stopped)' }),
      chambers: Type.Array(
        Type.Object({
          chamber: Type.Integer({ description: 'numbered from 1' }),
          litAfterS: Nullable(Type.Number({ description: 'seconds after flame established; null: not lit' })),
          endDeviationC: Nullable(Type.Number({ description: 'estimate at the end of the window, from the average chamber, °C' })),
          endDeficitFraction: Nullable(Type.Number({ description: 'its deficit as a fraction of the ring rise since firing' })),
        }),
      ),
      unlitChambers: Type.Array(Type.Integer()),
      lateChambers: Type.Array(Type.Object({ chamber: Type.Integer(), lateByS: Type.Number() })),
    }),
  ),
  findings: Type.Array(FindingSchema),
  caution: Type.String(),
});

const StartListReply = Type.Object({
  unitId: Type.String(),
  from: Time,
  to: Time,
  counters: StartCounters,
  starts: Type.Array(StartSummary),
});

const byPool = new WeakMap<object, StartsRepository>();
function startsOf(app: FastifyInstance): StartsRepository {
  let r = byPool.get(app.pool);
  if (!r) byPool.set(app.pool, (r = createStartsRepository(app.pool)));
  return r;
}

export async function startRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();

  app.get('/v1/units/:unitId/starts', {
    schema: {
      tags: ['starts'],
      summary: 'Starts of a unit with crank time in the window (default the 90 days up to the unit\'s last ring), newest first, and its start counters',
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object(Window),
      response: { 200: StartListReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const w = await readWindow(readsOf(app), unit.id, request.query, LIST_DEFAULT_DAYS, LIST_MAX_DAYS, 'The start list', reply);
    const repo = startsOf(app);
    const [starts, counters] = await Promise.all([repo.list(unit.id, w.fromMs, w.toMs, LIST_LIMIT), repo.counters([unit.id])]);
    const { unitId: _u, ...c } = counters[0];
    return { unitId: unit.id, from: new Date(w.fromMs).toISOString(), to: new Date(w.toMs).toISOString(), counters: c, starts };
  });

  app.get('/v1/units/:unitId/starts/trend.svg', {
    schema: {
      tags: ['starts', 'pictures'],
      summary: 'Start-by-start trend of the starts with crank time in the window (default the 90 days up to the unit\'s last ring): crossfire completion time and exhaust spread at full speed no load, oldest left, with their medians',
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object(Window),
      response: { 200: Type.String({ description: 'SVG document (image/svg+xml)' }), ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const w = await readWindow(readsOf(app), unit.id, request.query, LIST_DEFAULT_DAYS, LIST_MAX_DAYS, 'The start trend', reply);
    const starts = (await startsOf(app).list(unit.id, w.fromMs, w.toMs, LIST_LIMIT)).reverse();
    const svg = startTrendSvg({
      title: `${unit.name} (${unit.id}): start by start`,
      subtitle: `${starts.length} start${starts.length === 1 ? '' : 's'} cranked ${new Date(w.fromMs).toISOString().slice(0, 10)} to ${new Date(w.toMs).toISOString().slice(0, 10)}`,
      temperatureUnit: unit.config.temperatureUnit,
      starts: starts.map((s) => ({
        startId: s.startId,
        crankMs: Date.parse(s.crankAt),
        outcome: s.outcome,
        crossfireCompleteS: s.crossfireCompleteS,
        spreadFsnlC: s.spreadFsnlC,
        chamberFinding: s.findingKinds.includes('chamber_unlit'),
      })),
    });
    return reply.header('content-type', 'image/svg+xml; charset=utf-8').send(svg);
  });

  app.get('/v1/units/:unitId/starts/:startId', {
    schema: {
      tags: ['starts'],
      summary: 'One start: phase timeline, crossfire completion time, per-chamber lighting, findings',
      params: StartParams,
      response: { 200: StartDetailReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const s = await startsOf(app).get(unit.id, request.params.startId);
    if (!s) throw notFound(`Unit ${unit.id} has no start ${request.params.startId}; GET /v1/units/${unit.id}/starts lists them.`);
    const { trace: _t, ...rest } = s;
    return { unitId: unit.id, ...rest, caution: ADVISORY_CAUTION };
  });

  app.get('/v1/units/:unitId/starts/:startId/start.svg', {
    schema: {
      tags: ['starts', 'pictures'],
      summary: 'Picture of one start: speed, fuel, exhaust spread and chamber estimates against time, phases shaded',
      params: StartParams,
      response: { 200: Type.String({ description: 'SVG document (image/svg+xml)' }), ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const s = await startsOf(app).get(unit.id, request.params.startId);
    if (!s) throw notFound(`Unit ${unit.id} has no start ${request.params.startId}; GET /v1/units/${unit.id}/starts lists them.`);
    const crankMs = Date.parse(s.crankAt);
    const svg = startSvg({
      title: `${unit.name} (${unit.id}): start ${s.crankAt.slice(0, 19).replace('T', ' ')} UTC`,
      subtitle: `${s.outcome.replace(/_/g, ' ')}${s.stoppedIn ? ` in ${s.stoppedIn.replace(/_/g, ' ')}` : ''}; crossfire ${s.crossfireCompleteS === null ? 'not complete' : `complete ${s.crossfireCompleteS} s after flame`}${s.unlitChambers.length ? `; unlit chamber ${s.unlitChambers.join(', ')}` : ''}`,
      temperatureUnit: unit.config.temperatureUnit,
      crankMs,
      endMs: Date.parse(s.endAt),
      phases: s.phases.map((p) => ({ phase: p.phase, startMs: Date.parse(p.startAt), durationS: p.durationS })),
      trace: s.trace,
      unlitChambers: [...s.unlitChambers, ...(s.lighting?.lateChambers.map((l) => l.chamber) ?? [])],
      crossfireCompleteS: s.crossfireCompleteS,
      outcome: s.outcome,
    });
    return reply.header('content-type', 'image/svg+xml; charset=utf-8').send(svg);
  });
}
