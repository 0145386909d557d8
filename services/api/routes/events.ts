/**
 * Maintenance events of a unit, in ring time:
 *   POST   /v1/units/:unitId/events            (operator and up) record one
 *   GET    /v1/units/:unitId/events?from&to    (viewer and up) list them, oldest first
 *   DELETE /v1/units/:unitId/events/:eventId   (admin) remove one recorded in error
 * Kinds: thermocouple_replaced (which probes), nozzles_worked (which chambers, or all),
 * combustion_inspection, combustor_tuning, compressor_wash, other. A thermocouple replaced has
 * the analysis learn the new probe's offset (services/worker/probe-offsets.ts); every event is
 * drawn on the trend pictures and listed in the pre-outage review.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { createEventsRepository, type EventKind, type MaintenanceEvent } from '../../db/events.ts';
import { NEW_PERIOD_KINDS } from '../../core/baseline-periods.ts';
import { notFound, unprocessable } from '../../http/errors.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { UnitParams } from '../schemas.ts';
import { DAY_MS, Window, timeWindow, unitOr404 } from './read-common.ts';

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);

export const EventKindSchema = Type.Union([Type.Literal('thermocouple_replaced'), Type.Literal('nozzles_worked'), Type.Literal('combustion_inspection'), Type.Literal('combustor_tuning'), Type.Literal('compressor_wash'), Type.Literal('other')], {
  description: 'thermocouple_replaced (give thermocouples), nozzles_worked (chambers, or leave out for all), combustion_inspection, combustor_tuning, compressor_wash, other',
});

/** What each kind is called where people read it. */
export const EVENT_WORDS: Record<EventKind, string> = {
  thermocouple_replaced: 'thermocouple replaced',
  nozzles_worked: 'fuel nozzles worked on',
  combustion_inspection: 'combustion inspection',
  combustor_tuning: 'combustor tuning',
  compressor_wash: 'compressor wash',
  other: 'maintenance',
};

/** An event in a few words, as the pictures and the review write it: "thermocouple replaced: 7". */
export function eventLabel(e: Pick<MaintenanceEvent, 'kind' | 'thermocouples' | 'chambers'>): string {
  const which = e.kind === 'thermocouple_replaced' ? `: ${(e.thermocouples ?? []).join(', ')}` : e.chambers ? `: chamber${e.chambers.length > 1 ? 's' : ''} ${e.chambers.join(', ')}` : e.kind === 'nozzles_worked' ? ': all chambers' : '';
  return EVENT_WORDS[e.kind] + which;
}

const EventBody = Type.Object(
  {
    kind: EventKindSchema,
    at: Type.String({ format: 'date-time', description: 'when the work took effect, in ring time (RFC 3339): the first ring after it is the first of the machine as it is now' }),
    by: Type.String({ minLength: 1, maxLength: 200, description: 'the person recording it, by name' }),
    note: Type.Optional(Type.String({ maxLength: 4000, description: 'what was done, e.g. "probe 7 and its lead replaced, same class 2 type K"' })),
    thermocouples: Type.Optional(Type.Array(Type.Integer({ minimum: 1, maximum: 64 }), { minItems: 1, maxItems: 64, description: 'the thermocouples replaced, numbered from 1 (thermocouple_replaced only)' })),
    chambers: Type.Optional(Type.Array(Type.Integer({ minimum: 1, maximum: 32 }), { minItems: 1, maxItems: 32, description: 'the chambers worked on, numbered from 1; leave out for all chambers' })),
  },
  { additionalProperties: false },
);

export const EventReply = Type.Object({
  id: Type.String(),
  unitId: Type.String(),
  kind: EventKindSchema,
  at: Type.String({ description: 'ring time the work took effect' }),
  thermocouples: Nullable(Type.Array(Type.Integer())),
  chambers: Nullable(Type.Array(Type.Integer(), { description: 'null: all chambers (or none concerned)' })),
  by: Type.String(),
  note: Nullable(Type.String()),
  recordedAt: Type.String(),
  learntOffsetsC: Type.Record(Type.String(), Type.Number(), { description: 'thermocouple replaced: per probe (numbered from 1), its offset against the baseline once learnt, °C' }),
});

const EventParams = Type.Object({ ...UnitParams.properties, eventId: Type.String({ minLength: 1, maxLength: 100, description: 'the id of the event' }) });

const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply, 422: ErrorReply };

/** What recording an event does, in words, for the reply. */
function effectOf(e: MaintenanceEvent, probeOffsetRings: number, baselineAutoDays: number, reanalysed: boolean): string {
  const where = e.chambers ? `chamber${e.chambers.length > 1 ? 's' : ''} ${e.chambers.join(', ')}` : 'the whole unit';
  const what =
    e.kind === 'thermocouple_replaced'
      ? `The offset of thermocouple${e.thermocouples!.length > 1 ? 's' : ''} ${e.thermocouples!.join(', ')} is learnt again from the ${probeOffsetRings} steady rings after ${e.at} and taken off ${e.thermocouples!.length > 1 ? 'their' : 'its'} residual; no step finding is raised for it, and its drift restarts.`
      : (NEW_PERIOD_KINDS as readonly string[]).includes(e.kind)
        ? `A new baseline period starts at ${e.at} for ${where}: a baseline is fitted automatically from the steady rings of the ${baselineAutoDays} days after it; until then the rings are judged on the baseline from before the work with a caution, not as drift, and the drift of ${where} restarts.`
        : 'The event is drawn on the trend pictures and listed in the pre-outage review.';
  const past = reanalysed ? ' Analysis had passed it: the rings from then on are judged again with it.' : '';
  return what + past;
}

export async function eventRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const repo = createEventsRepository(app.pool);

  app.post('/v1/units/:unitId/events', {
    schema: {
      tags: ['events'],
      summary: 'Record a maintenance event (thermocouple replaced, fuel nozzles worked on, inspection, tuning, compressor wash, other) in ring time',
      params: UnitParams,
      body: EventBody,
      response: { 201: Type.Object({ ...EventReply.properties, effect: Type.String({ description: 'what recording it does' }) }), ...errors },
    },
    config: { access: 'act' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const b = request.body;
    const at = new Date(b.at);
    if (at.getTime() > Date.now() + DAY_MS) throw unprocessable(`"at" (${b.at}) is more than a day ahead; record an event once the work is done, at the time it took effect.`, [{ field: 'at', reason: 'in the future' }]);
    const tcCount = unit.config.thermocouples.count;
    const chCount = unit.config.chambers.count;
    if (b.kind === 'thermocouple_replaced' && !b.thermocouples) throw unprocessable('A thermocouple_replaced event needs "thermocouples": the probes replaced, numbered from 1.', [{ field: 'thermocouples', reason: 'required for thermocouple_replaced' }]);
    if (b.kind !== 'thermocouple_replaced' && b.thermocouples) throw unprocessable(`"thermocouples" belongs to thermocouple_replaced events; a ${b.kind} event names chambers, or none.`, [{ field: 'thermocouples', reason: `not for ${b.kind}` }]);
    const badTc = (b.thermocouples ?? []).filter((i) => i > tcCount);
    if (badTc.length) throw unprocessable(`Unit ${unit.id} has ${tcCount} thermocouples; ${badTc.join(', ')} do${badTc.length > 1 ? '' : 'es'} not exist (numbered from 1).`, [{ field: 'thermocouples', reason: `above ${tcCount}` }]);
    const badCh = (b.chambers ?? []).filter((k) => k > chCount);
    if (badCh.length) throw unprocessable(`Unit ${unit.id} has ${chCount} chambers; ${badCh.join(', ')} do${badCh.length > 1 ? '' : 'es'} not exist (numbered from 1).`, [{ field: 'chambers', reason: `above ${chCount}` }]);
    const e = await repo.create({
      unitId: unit.id,
      kind: b.kind as EventKind,
      at,
      thermocouples: b.thermocouples ? [...new Set(b.thermocouples)].sort((p, q) => p - q) : null,
      chambers: b.chambers ? [...new Set(b.chambers)].sort((p, q) => p - q) : null,
      by: b.by,
      note: b.note ?? null,
      keyId: request.principal!.keyId,
    });
    const { reanalysed, ...event } = e;
    request.log.info({ unitId: unit.id, eventId: e.id, kind: e.kind, at: e.at, reanalysed }, 'maintenance event recorded');
    return reply.status(201).send({ ...event, effect: effectOf(event, app.appConfig.worker.probeOffsetRings, app.appConfig.worker.baselineAutoDays, reanalysed) });
  });

  app.get('/v1/units/:unitId/events', {
    schema: {
      tags: ['events'],
      summary: 'Maintenance events of a unit, oldest first (default: all of them)',
      params: UnitParams,
      querystring: Type.Object(Window, { additionalProperties: false }),
      response: { 200: Type.Object({ unitId: Type.String(), events: Type.Array(EventReply) }), ...errors },
    },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const q = request.query;
    const w = q.from || q.to ? timeWindow({ from: q.from ?? '1900-01-01T00:00:00Z', to: q.to }, Date.now(), 0, 1e6, 'An event list') : null;
    return { unitId: unit.id, events: await repo.list(unit.id, w?.fromMs, w?.toMs) };
  });

  app.delete('/v1/units/:unitId/events/:eventId', {
    schema: { tags: ['events'], summary: 'Remove an event recorded in error', params: EventParams, response: { 204: Type.Null(), ...errors } },
    config: { access: 'admin' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    if (!(await repo.remove(unit.id, request.params.eventId))) throw notFound(`Unit ${unit.id} has no event ${request.params.eventId}.`);
    request.log.info({ unitId: unit.id, eventId: request.params.eventId }, 'maintenance event deleted');
    return reply.status(204).send(null);
  });
}
