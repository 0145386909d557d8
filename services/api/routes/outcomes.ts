/**
 * Inspection outcomes: what was found after a call to inspect, and the tool's own precision in
 * the field counted from them.
 *   POST /v1/alerts/:id/outcome      (operator and up) record what the inspection found
 *   GET  /v1/units/:unitId/outcomes  (viewer and up) the unit's calls with their outcomes, counted
 *   GET  /v1/fleet/outcomes          (viewer and up) the counts by unit, site and fleet
 * A call to inspect is an alert that names a chamber or a thermocouple (core/outcomes.ts).
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type Static } from 'typebox';
import { CALL_KINDS, countOutcomes, firstAlertMs, isCallKind, type Call, type OutcomeValue } from '../../core/outcomes.ts';
import { createAlertsRepository } from '../../db/alerts.ts';
import { createOutcomesRepository, type CallRow } from '../../db/outcomes.ts';
import { keyCoversUnit, unitScope } from '../../http/auth.ts';
import { notFound, unprocessable } from '../../http/errors.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { UnitParams } from '../schemas.ts';
import { readErrors, unitOr404 } from './read-common.ts';

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);

const OutcomeSchema = Type.Union([Type.Literal('confirmed'), Type.Literal('not_found'), Type.Literal('not_inspected')], {
  description: 'confirmed: the inspection found the fault the alert named; not_found: it was looked at and found sound; not_inspected: closed without a look',
});

const OutcomeBody = Type.Object(
  {
    by: Type.String({ minLength: 1, maxLength: 200, description: 'the person recording the outcome, by name' }),
    outcome: OutcomeSchema,
    found: Type.Optional(Type.String({ minLength: 1, maxLength: 2000, description: 'what the inspection found (needed for confirmed), e.g. "nozzle 4 tip half plugged with coke"' })),
    inspectedAt: Type.Optional(Type.String({ format: 'date-time', description: 'when the chamber or probe was looked at (the outage), RFC 3339; needed unless not_inspected; not before the alert was raised' })),
  },
  { additionalProperties: false },
);

export const OutcomeReply = Type.Object({
  outcome: OutcomeSchema,
  found: Nullable(Type.String()),
  inspectedAt: Nullable(Type.String()),
  recordedBy: Type.String(),
  recordedAt: Type.String(),
});

const CallReply = Type.Object({
  alertId: Type.String(),
  unitId: Type.String(),
  kind: Type.String(),
  chamber: Nullable(Type.Integer({ description: 'numbered from 1' })),
  thermocouple: Nullable(Type.Integer({ description: 'numbered from 1' })),
  grade: Type.String(),
  raisedAt: Type.String(),
  firstAlertAt: Type.String({ description: 'the first alert on this chamber or thermocouple since its last inspection: where the lead time starts' }),
  active: Type.Boolean(),
  message: Type.String(),
  outcome: Nullable(OutcomeReply),
});

const KindCounts = Type.Object({
  kind: Type.String(),
  calls: Type.Integer(),
  confirmed: Type.Integer(),
  notFound: Type.Integer(),
  notInspected: Type.Integer(),
  open: Type.Integer({ description: 'no outcome recorded yet' }),
  precision: Nullable(Type.Number({ description: 'confirmed / (confirmed + not found); null before any inspection' })),
  leadTimeDays: Type.Object(
    { count: Type.Integer(), median: Nullable(Type.Number()), min: Nullable(Type.Number()), max: Nullable(Type.Number()) },
    { description: 'over confirmed calls: days from the first alert on the chamber or thermocouple to the inspection' },
  ),
});
type KindCounts = Static<typeof KindCounts>;

const Counts = Type.Array(KindCounts, { description: `one row per kind of call: ${CALL_KINDS.join(', ')}` });

const UnitOutcomesReply = Type.Object({ unitId: Type.String(), calls: Type.Array(CallReply), counts: Counts });
const FleetOutcomesReply = Type.Object({
  fleet: Counts,
  sites: Type.Array(Type.Object({ site: Type.String(), counts: Counts })),
  units: Type.Array(Type.Object({ unitId: Type.String(), site: Type.String(), counts: Counts })),
});

const callOf = (r: CallRow): Call => ({
  alertId: r.alertId,
  unitId: r.unitId,
  kind: r.kind,
  chamber: r.chamber,
  thermocouple: r.thermocouple,
  raisedAtMs: Date.parse(r.raisedAt),
  outcome: r.outcome?.outcome ?? null,
  inspectedAtMs: r.outcome?.inspectedAt ? Date.parse(r.outcome.inspectedAt) : null,
});

/** Counts of the rows, grouped by a key, in key order. */
function countBy(rows: CallRow[], calls: Map<string, Call>, first: Map<string, number>, key: (r: CallRow) => string): Array<[string, KindCounts[]]> {
  const groups = new Map<string, Call[]>();
  for (const r of rows) {
    const k = key(r);
    const g = groups.get(k);
    if (g) g.push(calls.get(r.alertId)!);
    else groups.set(k, [calls.get(r.alertId)!]);
  }
  return [...groups].sort(([a], [b]) => a.localeCompare(b)).map(([k, g]) => [k, countOutcomes(g, first)]);
}

const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply, 422: ErrorReply };

export async function outcomeRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const alerts = createAlertsRepository(app.pool);
  const outcomes = createOutcomesRepository(app.pool);

  app.post('/v1/alerts/:id/outcome', {
    schema: {
      tags: ['alerts'],
      summary: 'Record what the inspection after a chamber or thermocouple alert found; acknowledges the alert',
      description: 'A later record replaces the earlier one. Only alerts that name a chamber or a thermocouple take an outcome.',
      params: Type.Object({ id: Type.String({ minLength: 1, maxLength: 100, description: 'the id of the alert' }) }),
      body: OutcomeBody,
      response: { 200: Type.Object({ alertId: Type.String(), unitId: Type.String(), outcome: OutcomeReply }), ...errors },
    },
    config: { access: 'act' },
  }, async (request) => {
    const id = request.params.id;
    const a = await alerts.getRow(id);
    if (!a || !keyCoversUnit(request.principal!, a.unitId)) throw notFound(`No alert ${id}.`);
    const b = request.body;
    if (!isCallKind(a.kind)) {
      throw unprocessable(`Alert ${id} is a ${a.kind} alert, which names no chamber or thermocouple to inspect; outcomes are kept for ${CALL_KINDS.join(', ')}.`, [{ field: 'id', reason: `kind ${a.kind} takes no outcome` }]);
    }
    if (b.outcome === 'confirmed' && !b.found) throw unprocessable('A confirmed outcome needs "found": say what the inspection found.', [{ field: 'found', reason: 'required when confirmed' }]);
    if (b.outcome !== 'not_inspected' && !b.inspectedAt) throw unprocessable(`A ${b.outcome} outcome needs "inspectedAt": when the ${a.chamber !== null ? 'chamber' : 'thermocouple'} was looked at.`, [{ field: 'inspectedAt', reason: `required when ${b.outcome}` }]);
    const inspectedAt = b.outcome === 'not_inspected' || !b.inspectedAt ? null : new Date(b.inspectedAt);
    if (inspectedAt && inspectedAt.getTime() < a.raisedAt.getTime()) {
      throw unprocessable(`"inspectedAt" (${b.inspectedAt}) is before the alert was raised (${a.raisedAt.toISOString()}); an inspection before the call cannot answer it.`, [{ field: 'inspectedAt', reason: 'before the alert was raised' }]);
    }
    const stored = await outcomes.record({ alertId: a.id, unitId: a.unitId, outcome: b.outcome as OutcomeValue, found: b.found ?? null, inspectedAt, by: b.by, keyId: request.principal!.keyId });
    const comment = `inspection outcome: ${b.outcome.replace('_', ' ')}${b.found ? ` (${b.found})` : ''}`;
    await alerts.acknowledge(a.id, { by: b.by, comment, keyId: request.principal!.keyId, now: new Date() });
    request.log.info({ unitId: a.unitId, alertId: a.id, outcome: b.outcome, by: b.by }, 'inspection outcome recorded');
    return { alertId: a.id, unitId: a.unitId, outcome: stored };
  });

  app.get('/v1/units/:unitId/outcomes', {
    schema: { tags: ['read'], summary: 'Calls to inspect of one unit with their outcomes, and the counts per kind', params: UnitParams, response: { 200: UnitOutcomesReply, ...readErrors } },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const rows = await outcomes.calls([unit.id]);
    const calls = rows.map(callOf);
    const first = firstAlertMs(calls);
    return {
      unitId: unit.id,
      calls: rows.map((r) => ({ alertId: r.alertId, unitId: r.unitId, kind: r.kind, chamber: r.chamber, thermocouple: r.thermocouple, grade: r.grade, raisedAt: r.raisedAt, firstAlertAt: new Date(first.get(r.alertId)!).toISOString(), active: r.active, message: r.message, outcome: r.outcome })),
      counts: countOutcomes(calls, first),
    };
  });

  app.get('/v1/fleet/outcomes', {
    schema: { tags: ['read'], summary: 'How many calls to inspect were confirmed, not found or are open, per kind: by unit, by site and for the fleet, with lead times', response: { 200: FleetOutcomesReply, ...readErrors } },
    config: { access: 'read' },
  }, async (request) => {
    const rows = await outcomes.calls(unitScope(request));
    const calls = new Map(rows.map((r) => [r.alertId, callOf(r)]));
    const first = firstAlertMs([...calls.values()]);
    const site = new Map(rows.map((r) => [r.unitId, r.site]));
    return {
      fleet: countOutcomes([...calls.values()], first),
      sites: countBy(rows, calls, first, (r) => r.site).map(([s, counts]) => ({ site: s, counts })),
      units: countBy(rows, calls, first, (r) => r.unitId).map(([u, counts]) => ({ unitId: u, site: site.get(u)!, counts })),
    };
  });
}
