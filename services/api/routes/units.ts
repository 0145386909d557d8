/**
 * Units: POST /v1/units (admin), GET /v1/units, GET /v1/units/:unitId, PATCH /v1/units/:unitId
 * (admin). A change of geometry, swirl, rating or display unit adds a configuration version
 * that takes effect at `effectiveFrom` (default now); name and site change in place.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import type { UnitConfig } from '../../core/types.ts';
import { DuplicateEffectiveTimeError, DuplicateUnitError, type UnitRecord } from '../../db/units.ts';
import { HttpError, conflict, notFound } from '../../http/errors.ts';
import { assertConsistent, unitFromBody } from '../unit-body.ts';
import { unitScope } from '../../http/auth.ts';
import { ErrorReply } from '../../http/schemas.ts';
import { CreateUnitBody, PatchUnitBody, UnitParams, UnitReply } from '../schemas.ts';

const CONFIG_KEYS = ['ratedPowerMw', 'thermocouples', 'chambers', 'swirl', 'temperatureUnit', 'view', 'correction', 'modes'] as const;

export function unitReply(u: UnitRecord) {
  return {
    id: u.id,
    name: u.name,
    site: u.site,
    family: u.family ?? null,
    ...u.config,
    version: u.version,
    versions: u.versions.map((v) => ({ version: v.version, effectiveFrom: v.effectiveFrom, createdAt: v.createdAt })),
  };
}


const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply, 409: ErrorReply, 422: ErrorReply };

export async function unitRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();

  app.post('/v1/units', {
    schema: { tags: ['units'], summary: 'Register a unit', body: CreateUnitBody, response: { 201: UnitReply, ...errors } },
    config: { access: 'admin' },
  }, async (request, reply) => {
    const { identity, config } = unitFromBody(request.body);
    const { id } = identity;
    const scope = request.principal?.unitIds ?? null;
    if (scope !== null && !scope.includes(id)) {
      throw new HttpError(403, 'forbidden', `This key is limited to units ${scope.join(', ')}; it may not register unit ${id}.`);
    }
    try {
      const unit = await app.repos.units.create(identity, config, request.principal?.keyId ?? null);
      request.log.info({ unitId: id }, 'unit registered');
      return reply.status(201).send(unitReply(unit));
    } catch (err) {
      if (err instanceof DuplicateUnitError) throw conflict(`Unit ${id} already exists; use PATCH /v1/units/${id} to change it.`);
      throw err;
    }
  });

  app.get('/v1/units', {
    schema: { tags: ['units'], summary: 'List units (those in the key\'s scope)', response: { 200: Type.Object({ units: Type.Array(UnitReply) }), ...errors } },
    config: { access: 'read' },
  }, async (request) => ({ units: (await app.repos.units.list(unitScope(request))).map(unitReply) }));

  app.get('/v1/units/:unitId', {
    schema: { tags: ['units'], summary: 'One unit with its configuration in force and its versions', params: UnitParams, response: { 200: UnitReply, ...errors } },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await app.repos.units.get(request.params.unitId);
    if (!unit) throw notFound(`No unit ${request.params.unitId}.`);
    return unitReply(unit);
  });

  app.patch('/v1/units/:unitId', {
    schema: { tags: ['units'], summary: 'Rename, or add a configuration version', params: UnitParams, body: PatchUnitBody, response: { 200: UnitReply, ...errors } },
    config: { access: 'admin' },
  }, async (request) => {
    const { name, site, family, effectiveFrom, ...changes } = request.body;
    const hasConfigChange = CONFIG_KEYS.some((k) => changes[k] !== undefined);
    const at = effectiveFrom ? new Date(effectiveFrom) : new Date();
    try {
      const unit = await app.repos.units.update(
        request.params.unitId,
        { name, site, family },
        hasConfigChange
          ? (base) => {
              const next = { ...base } as UnitConfig & Record<string, unknown>;
              for (const k of CONFIG_KEYS) if (changes[k] !== undefined) (next as Record<string, unknown>)[k] = changes[k];
              assertConsistent(next);
              return next;
            }
          : null,
        at,
        request.principal?.keyId ?? null,
      );
      if (!unit) throw notFound(`No unit ${request.params.unitId}.`);
      request.log.info({ unitId: unit.id, version: unit.version }, 'unit changed');
      return unitReply(unit);
    } catch (err) {
      if (err instanceof DuplicateEffectiveTimeError) throw conflict(err.message + '; choose another effectiveFrom.');
      throw err;
    }
  });
}
