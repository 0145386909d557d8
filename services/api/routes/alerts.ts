/**
 * Alerts and webhook subscriptions.
 *   GET  /v1/alerts?unitId&state&grade&minGrade&kind&cursor&limit   (viewer and up)
 *   GET  /v1/alerts/:id                                                (viewer and up)
 *   POST /v1/alerts/:id/ack | shelve | unshelve                        (operator and up)
 *   POST /v1/webhooks, GET /v1/webhooks, DELETE /v1/webhooks/:id,
 *   GET  /v1/webhooks/:id/deliveries                                   (admin)
 * Unit scope: these URLs name no unit, so the handlers check it. A key limited to some units
 * lists only their alerts and gets 403 for a unitId filter outside its scope; an alert of
 * another unit is 404, as an unknown one is, so that an alert id tells nothing about units the
 * key may not see.
 */
import { lookup } from 'node:dns/promises';
import type { FastifyInstance, FastifyRequest } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type TSchema } from 'typebox';
import { ADVISORY_CAUTION, type Grade } from '../../core/findings.ts';
import { checkTarget } from '../../core/webhook-target.ts';
import type { AlertKind } from '../../db/config.ts';
import { AlertClosedError } from '../../db/alert-actions.ts';
import { createAlertsRepository } from '../../db/alerts.ts';
import { decodeAlertCursor } from '../../db/alert-reads.ts';
import { decodeDeliveryCursor } from '../../db/webhooks.ts';
import type { AlertStateFilter } from '../../db/alert-rows.ts';
import { HttpError, badRequest, conflict, formatDuration, notFound, unprocessable } from '../../http/errors.ts';
import { keyCoversUnit, unitScope } from '../../http/auth.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { UnitId } from '../schemas.ts';

const Nullable = <T extends TSchema>(t: T) => Type.Union([t, Type.Null()]);

export const GradeSchema = Type.Union([Type.Literal('notice'), Type.Literal('warning'), Type.Literal('alarm'), Type.Literal('critical')], { description: 'notice < warning < alarm < critical' });
export const AlertKindSchema = Type.Union([
  Type.Literal('thermocouple_fault'),
  Type.Literal('coverage_degraded'),
  Type.Literal('spread_high'),
  Type.Literal('spread_jump'),
  Type.Literal('chamber_cold'),
  Type.Literal('chamber_hot'),
  Type.Literal('chamber_drift'),
  Type.Literal('unit_silent'),
  Type.Literal('chamber_unlit'),
  Type.Literal('start_failed'),
]);
export const AlertActionSchema = Type.Union([
  Type.Literal('raised'),
  Type.Literal('reactivated'),
  Type.Literal('escalated'),
  Type.Literal('deescalated'),
  Type.Literal('returned_to_normal'),
  Type.Literal('acknowledged'),
  Type.Literal('shelved'),
  Type.Literal('unshelved'),
  Type.Literal('shelf_expired'),
  Type.Literal('withdrawn'),
]);
const StateSchema = Type.Union([Type.Literal('active'), Type.Literal('cleared'), Type.Literal('shelved'), Type.Literal('open'), Type.Literal('all')], {
  description: 'active: condition present and not shelved; cleared: returned to normal; shelved; open: not yet both returned to normal and acknowledged; all (default)',
});
const Time = Type.String({ format: 'date-time' });
const AnyObject = Type.Object({}, { additionalProperties: true });

export const AlertHistoryReply = Type.Object({
  sequence: Type.String({ description: 'increases with every change; orders an alert\'s history' }),
  at: Type.String({ description: 'ring time for changes made by the rules, wall-clock time for people\'s actions' }),
  recordedAt: Type.String(),
  action: AlertActionSchema,
  grade: GradeSchema,
  fromGrade: Nullable(GradeSchema),
  by: Nullable(Type.String()),
  comment: Nullable(Type.String()),
  details: AnyObject,
});

export const AlertReply = Type.Object({
  id: Type.String(),
  unitId: Type.String(),
  kind: AlertKindSchema,
  grade: GradeSchema,
  chamber: Nullable(Type.Integer({ description: 'numbered from 1' })),
  thermocouple: Nullable(Type.Integer({ description: 'numbered from 1' })),
  active: Type.Boolean({ description: 'the condition is present; false: returned to normal' }),
  acknowledged: Type.Boolean(),
  acknowledgedAt: Nullable(Type.String()),
  acknowledgedBy: Nullable(Type.String()),
  shelvedUntil: Nullable(Type.String()),
  shelvedBy: Nullable(Type.String()),
  shelveReason: Nullable(Type.String()),
  raisedAt: Type.String(),
  lastChangedAt: Type.String(),
  clearedAt: Nullable(Type.String({ description: 'when it last returned to normal' })),
  closedAt: Nullable(Type.String({ description: 'returned to normal and acknowledged' })),
  message: Type.String(),
  advice: Type.String(),
  evidence: AnyObject,
  likelihood: Nullable(Type.Number({ description: 'that the named chamber is the right one, 0–1' })),
  runnerUpChamber: Nullable(Type.Integer()),
  runnerUpLikelihood: Nullable(Type.Number()),
  baselineVersion: Nullable(Type.Integer()),
  foundInHistory: Type.Boolean({
    description: 'raised while analysing history (a backlog, an import, a re-analysis); its times are ring times. Announced to webhooks once the unit has caught up, if still active',
  }),
  history: Type.Optional(Type.Array(AlertHistoryReply)),
  caution: Type.Optional(Type.String()),
});

const AlertList = Type.Object({
  alerts: Type.Array(AlertReply),
  next: Nullable(Type.String({ description: 'cursor of the next page' })),
  caution: Type.String(),
});

const ListQuery = Type.Object(
  {
    unitId: Type.Optional(UnitId),
    state: Type.Optional(StateSchema),
    grade: Type.Optional(GradeSchema),
    minGrade: Type.Optional(GradeSchema),
    kind: Type.Optional({ ...AlertKindSchema, description: 'only alerts of this kind' }),
    cursor: Type.Optional(Type.String({ maxLength: 400, description: 'the `next` of the previous page; leave out for the first page' })),
    limit: Type.Optional(Type.Integer({ minimum: 1, maximum: 200, description: 'page size, default 50' })),
  },
  { additionalProperties: false },
);

const IdParams = Type.Object({ id: Type.String({ minLength: 1, maxLength: 100, description: 'the id of the alert (or of the webhook subscription on /v1/webhooks routes)' }) });
const Person = Type.String({ minLength: 1, maxLength: 200, description: 'the person acting, by name' });

const AckBody = Type.Object({ by: Person, comment: Type.Optional(Type.String({ maxLength: 2000, description: 'what was seen or done, kept in the alert history' })) }, { additionalProperties: false });
const ShelveBody = Type.Object(
  { by: Person, until: Type.String({ format: 'date-time', description: 'the shelf ends then; in the future, within the configured longest shelf' }), reason: Type.String({ minLength: 1, maxLength: 2000, description: 'why it is shelved (e.g. a known fault with work booked), kept in the alert history' }) },
  { additionalProperties: false },
);
const UnshelveBody = Type.Object({ by: Type.Optional(Person) }, { additionalProperties: false });

const WebhookReply = Type.Object({
  id: Type.String(),
  url: Type.String(),
  minGrade: GradeSchema,
  unitIds: Type.Union([Type.Array(Type.String()), Type.Null()], { description: 'null: every unit' }),
  includeHistory: Type.Boolean({ description: 'also hears, as they happen, the changes of alerts found while analysing history' }),
  createdAt: Type.String(),
  createdBy: Nullable(Type.String()),
  deletedAt: Nullable(Type.String()),
});

const CreateWebhookBody = Type.Object(
  {
    url: Type.String({ format: 'uri', maxLength: 2000, description: 'http:// or https:// address that receives POSTs' }),
    minGrade: GradeSchema,
    secret: Type.String({ minLength: 16, maxLength: 500, description: 'key of the HMAC-SHA256 signature in X-Cansight-Signature; never shown again' }),
    unitIds: Type.Optional(Type.Array(UnitId, { minItems: 1, maxItems: 1000, description: 'only these units; default every unit' })),
    includeHistory: Type.Optional(
      Type.Boolean({
        description:
          'default false: an alert found while analysing history (an import, a backlog, a re-analysis) is announced once, when its unit has caught up, and only if still active; true: every change of it is sent as it is recorded',
      }),
    ),
  },
  { additionalProperties: false },
);

const DeliveryReply = Type.Object({
  id: Type.String(),
  outboxId: Type.String(),
  alertId: Type.String(),
  unitId: Type.String(),
  event: Type.String(),
  attempt: Type.Integer(),
  attemptedAt: Type.String(),
  durationMs: Type.Integer(),
  statusCode: Nullable(Type.Integer()),
  error: Nullable(Type.String()),
  outcome: Type.Union([Type.Literal('delivered'), Type.Literal('retry'), Type.Literal('dead')]),
});

const PageQuery = Type.Object(
  { cursor: Type.Optional(Type.String({ maxLength: 400, description: 'the `next` of the previous page; leave out for the first page' })), limit: Type.Optional(Type.Integer({ minimum: 1, maximum: 500, description: 'page size' })) },
  { additionalProperties: false },
);

const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply, 409: ErrorReply, 422: ErrorReply };

function outOfScope(request: FastifyRequest, unitId: string): HttpError {
  return new HttpError(403, 'forbidden', `This key is limited to units ${request.principal!.unitIds!.join(', ')}; it may not reach unit ${unitId}.`);
}

export async function alertRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const repo = createAlertsRepository(app.pool);
  const maxShelveS = app.appConfig.alerts.maxShelveS;

  /** The alert, after checking the key may see its unit; 404 when there is none. */
  async function visibleAlert(request: FastifyRequest, id: string) {
    const a = await repo.getRow(id);
    if (!a || !keyCoversUnit(request.principal!, a.unitId)) throw notFound(`No alert ${id}.`);
    return a;
  }

  app.get('/v1/alerts', {
    schema: { tags: ['alerts'], summary: 'Alerts, newest first, one page', querystring: ListQuery, response: { 200: AlertList, ...errors } },
    config: { access: 'read' },
  }, async (request) => {
    const q = request.query;
    const scope = unitScope(request);
    if (q.unitId && scope && !scope.includes(q.unitId)) throw outOfScope(request, q.unitId);
    const cursor = q.cursor ? decodeAlertCursor(q.cursor) : undefined;
    if (q.cursor && !cursor) throw badRequest('querystring cursor: not a cursor from this API; use the "next" value of the previous page.');
    const page = await repo.list({
      scope,
      unitId: q.unitId,
      state: (q.state ?? 'all') as AlertStateFilter,
      grade: q.grade as Grade | undefined,
      minGrade: q.minGrade as Grade | undefined,
      kind: q.kind as AlertKind | undefined,
      cursor,
      limit: q.limit ?? 50,
      now: new Date(),
    });
    return { ...page, caution: ADVISORY_CAUTION };
  });

  app.get('/v1/alerts/:id', {
    schema: { tags: ['alerts'], summary: 'One alert with its history', params: IdParams, response: { 200: AlertReply, ...errors } },
    config: { access: 'read' },
  }, async (request) => {
    await visibleAlert(request, request.params.id);
    const a = await repo.get(request.params.id);
    if (!a) throw notFound(`No alert ${request.params.id}.`);
    return { ...a, caution: ADVISORY_CAUTION };
  });

  app.post('/v1/alerts/:id/ack', {
    schema: { tags: ['alerts'], summary: 'Acknowledge; an alert already returned to normal closes', params: IdParams, body: AckBody, response: { 200: AlertReply, ...errors } },
    config: { access: 'act' },
  }, async (request) => {
    await visibleAlert(request, request.params.id);
    const r = await repo.acknowledge(request.params.id, { by: request.body.by, comment: request.body.comment ?? null, keyId: request.principal!.keyId, now: new Date() });
    if (!r) throw notFound(`No alert ${request.params.id}.`);
    if (r.change) request.log.info({ unitId: r.alert.unitId, alertId: r.alert.id, by: request.body.by, closed: r.alert.closedAt !== null }, 'alert acknowledged');
    return r.alert;
  });

  app.post('/v1/alerts/:id/shelve', {
    schema: { tags: ['alerts'], summary: 'Shelve until a time, by a named person, with a reason', params: IdParams, body: ShelveBody, response: { 200: AlertReply, ...errors } },
    config: { access: 'act' },
  }, async (request) => {
    const now = new Date();
    const until = new Date(request.body.until);
    const longest = `${formatDuration(maxShelveS)} (CANSIGHT_ALERT_MAX_SHELVE_S)`;
    if (until.getTime() <= now.getTime()) {
      throw unprocessable(`"until" (${request.body.until}) must lie ahead of now (${now.toISOString()}): give the time the shelf should end, at most ${longest} ahead, the longest shelf here.`, [{ field: 'until', reason: 'not in the future' }]);
    }
    if (until.getTime() - now.getTime() > maxShelveS * 1000) {
      throw unprocessable(`"until" (${request.body.until}) is ${formatDuration((until.getTime() - now.getTime()) / 1000)} ahead; the longest shelf here is ${longest}. Shelve until a time within it, and shelve again when it ends if the reason still holds.`, [{ field: 'until', reason: 'beyond the longest shelf' }]);
    }
    await visibleAlert(request, request.params.id);
    try {
      const r = await repo.shelve(request.params.id, { by: request.body.by, until, reason: request.body.reason, keyId: request.principal!.keyId, now });
      if (!r) throw notFound(`No alert ${request.params.id}.`);
      request.log.info({ unitId: r.alert.unitId, alertId: r.alert.id, by: request.body.by, until: until.toISOString() }, 'alert shelved');
      return r.alert;
    } catch (err) {
      if (err instanceof AlertClosedError) throw conflict(`${err.message}.`);
      throw err;
    }
  });

  app.post('/v1/alerts/:id/unshelve', {
    schema: { tags: ['alerts'], summary: 'Take off its shelf now (an alert not shelved is left as it is)', params: IdParams, body: UnshelveBody, response: { 200: AlertReply, ...errors } },
    config: { access: 'act' },
    // The body is optional here: a POST without one means {}.
    preValidation: async (request) => {
      if (request.body === undefined || request.body === null) request.body = {};
    },
  }, async (request) => {
    await visibleAlert(request, request.params.id);
    const by = request.body?.by ?? null;
    const r = await repo.unshelve(request.params.id, { by, keyId: request.principal!.keyId, now: new Date() });
    if (!r) throw notFound(`No alert ${request.params.id}.`);
    if (r.change) request.log.info({ unitId: r.alert.unitId, alertId: r.alert.id, by }, 'alert unshelved');
    return r.alert;
  });

  // Webhook subscriptions. A key limited to some units may subscribe to those units only, and
  // sees only subscriptions within them.
  const withinScope = (request: FastifyRequest, unitIds: string[] | null) => {
    const scope = unitScope(request);
    return scope === null || (unitIds !== null && unitIds.every((u) => scope.includes(u)));
  };

  app.post('/v1/webhooks', {
    schema: { tags: ['webhooks'], summary: 'Subscribe an address to alert changes at or above a grade', body: CreateWebhookBody, response: { 201: WebhookReply, ...errors } },
    config: { access: 'admin' },
  }, async (request, reply) => {
    const b = request.body;
    let url: URL;
    try {
      url = new URL(b.url);
    } catch {
      throw unprocessable(`url ${b.url} is not an address.`, [{ field: 'url', reason: 'not a URL' }]);
    }
    if (url.protocol !== 'http:' && url.protocol !== 'https:') throw unprocessable(`url uses ${url.protocol}; use http:// or https://.`, [{ field: 'url', reason: 'not http or https' }]);
    if (url.username || url.password) throw unprocessable('url carries a user name or password; the signature authenticates the sender, so leave them out.', [{ field: 'url', reason: 'credentials in the URL' }]);
    // Only public addresses, unless allowed (see core/webhook-target.ts); a name that has no
    // address yet is taken, and checked again at each delivery.
    const target = await checkTarget(url, (host) => lookup(host, { all: true }), app.appConfig.webhooks.allowHosts);
    if (!target.ok && !target.unresolved) throw unprocessable(`url: ${target.reason}.`, [{ field: 'url', reason: target.reason }]);
    const unitIds = b.unitIds ? [...new Set(b.unitIds)] : null;
    if (!withinScope(request, unitIds)) {
      throw new HttpError(403, 'forbidden', `This key is limited to units ${unitScope(request)!.join(', ')}; list unitIds within them.`);
    }
    if (unitIds) {
      const known = new Set((await app.repos.units.list(unitIds)).map((u) => u.id));
      const unknown = unitIds.filter((u) => !known.has(u));
      if (unknown.length) throw unprocessable(`unitIds names units that do not exist: ${unknown.join(', ')}.`, unknown.map((u) => ({ field: 'unitIds', reason: `no unit ${u}` })));
    }
    const w = await repo.createWebhook({ url: url.toString(), minGrade: b.minGrade as Grade, secret: b.secret, unitIds, includeHistory: b.includeHistory === true, createdBy: request.principal!.keyId });
    request.log.info({ webhookId: w.id, minGrade: w.minGrade, unitIds }, 'webhook subscribed');
    return reply.status(201).send(w);
  });

  app.get('/v1/webhooks', {
    schema: { tags: ['webhooks'], summary: 'Live subscriptions (secrets are never shown)', response: { 200: Type.Object({ webhooks: Type.Array(WebhookReply) }), ...errors } },
    config: { access: 'admin' },
  }, async (request) => ({ webhooks: (await repo.listWebhooks()).filter((w) => withinScope(request, w.unitIds)) }));

  async function visibleWebhook(request: FastifyRequest, id: string) {
    const w = await repo.getWebhook(id);
    if (!w || !withinScope(request, w.unitIds)) throw notFound(`No webhook ${id}.`);
    return w;
  }

  app.delete('/v1/webhooks/:id', {
    schema: { tags: ['webhooks'], summary: 'Unsubscribe; undelivered events are cancelled, the delivery log is kept', params: IdParams, response: { 204: Type.Null(), ...errors } },
    config: { access: 'admin' },
  }, async (request, reply) => {
    const w = await visibleWebhook(request, request.params.id);
    if (w.deletedAt || !(await repo.deleteWebhook(w.id))) throw notFound(`No webhook ${request.params.id}.`);
    request.log.info({ webhookId: w.id }, 'webhook deleted');
    return reply.status(204).send(null);
  });

  app.get('/v1/webhooks/:id/deliveries', {
    schema: { tags: ['webhooks'], summary: 'Delivery log of a subscription, newest attempt first', params: IdParams, querystring: PageQuery, response: { 200: Type.Object({ deliveries: Type.Array(DeliveryReply), next: Nullable(Type.String()) }), ...errors } },
    config: { access: 'admin' },
  }, async (request) => {
    const w = await visibleWebhook(request, request.params.id);
    const afterId = request.query.cursor ? decodeDeliveryCursor(request.query.cursor) : undefined;
    if (request.query.cursor && !afterId) throw badRequest('querystring cursor: not a cursor from this API; use the "next" value of the previous page.');
    return repo.listDeliveries(w.id, { afterId, limit: request.query.limit ?? 100 });
  });
}
