/**
 * The one guard: every route states its access in `config.access`; this hook reads the bearer
 * key, finds it, and answers 401 (no key, unknown or revoked key) or 403 (wrong role, or a
 * unit outside the key's scope) before the handler runs. A route whose URL names a unit
 * (:unitId) is checked against the key's unit scope here; routes that list units filter by it.
 */
import type { FastifyInstance, FastifyRequest } from 'fastify';
import fp from 'fastify-plugin';
import { HttpError } from './errors.ts';
import { ACCESS_ROLES } from './context.ts';
import { hashKey, type KeyRecord } from '../db/keys.ts';

export function bearerKey(request: FastifyRequest): string | undefined {
  const h = request.headers.authorization;
  if (!h) return undefined;
  const m = /^Bearer\s+(\S+)\s*$/i.exec(h);
  return m ? m[1] : undefined;
}

const keyHashes = new WeakMap<FastifyRequest, string | null>();

/**
 * The hash of the request's bearer key (as stored, see hashKey), or undefined without one;
 * worked out once per request for the rate limit and the guard both.
 */
export function bearerKeyHash(request: FastifyRequest): string | undefined {
  let h = keyHashes.get(request);
  if (h === undefined) {
    const value = bearerKey(request);
    h = value ? hashKey(value) : null;
    keyHashes.set(request, h);
  }
  return h ?? undefined;
}

/** True when the key may see or write this unit. */
export function keyCoversUnit(key: KeyRecord, unitId: string): boolean {
  return key.unitIds === null || key.unitIds.includes(unitId);
}

/** The unit scope to filter lists by: null for every unit. */
export function unitScope(request: FastifyRequest): string[] | null {
  return request.principal?.unitIds ?? null;
}

/**
 * The guard is added to each route as it is declared, after the hooks of plugins registered
 * before it (the rate limit), so those run first. A route that does not say who may call it is
 * refused at registration: access is never assumed.
 */
export const authPlugin = fp(async (app: FastifyInstance) => {
  app.decorateRequest('principal', null);
  app.addHook('onRoute', (route) => {
    const access = route.config?.access;
    if (access === undefined) throw new Error(`Route ${String(route.method)} ${route.url} does not say who may call it: set config.access ('public', 'read', 'act', 'admin' or 'ingest')`);
    if (access === 'public') return;
    const hooks = route.onRequest === undefined ? [] : Array.isArray(route.onRequest) ? route.onRequest : [route.onRequest];
    route.onRequest = [...hooks, guard];
  });
  async function guard(request: FastifyRequest): Promise<void> {
    const access = request.routeOptions.config?.access ?? 'public';
    if (access === 'public') return;
    const hash = bearerKeyHash(request);
    if (!hash) throw new HttpError(401, 'unauthorized', 'An API key is required: send "Authorization: Bearer <key>".');
    const key = await app.repos.keys.verifyHash(hash);
    if (!key) throw new HttpError(401, 'unauthorized', 'The API key is unknown or has been revoked.');
    request.principal = key;
    if (!ACCESS_ROLES[access].includes(key.role)) {
      throw new HttpError(403, 'forbidden', `A key with role "${key.role}" may not do this; it needs one of: ${ACCESS_ROLES[access].join(', ')}.`);
    }
    const unitId = (request.params as Record<string, unknown> | undefined)?.unitId;
    if (typeof unitId === 'string' && !keyCoversUnit(key, unitId)) {
      throw new HttpError(403, 'forbidden', `This key is limited to units ${key.unitIds!.join(', ')}; it may not reach unit ${unitId}.`);
    }
  }
});
