/**
 * The HTTP application of a process: the server of services/http with the route sets this
 * process serves, the read/act API, ingest, or both (cansight start), and the API's part of
 * the OpenAPI document (its examples cover both route sets).
 */
import type { FastifyInstance } from 'fastify';
import { apiDocument } from '../api/openapi.ts';
import { apiRoutes } from '../api/routes.ts';
import { buildHttpServer, type HttpDeps, type RoutePlugin } from '../http/server.ts';
import { ingestRoutes } from '../ingest/routes.ts';

export interface AppParts {
  api: boolean;
  ingest: boolean;
}

export interface AppDeps extends HttpDeps {
  parts?: AppParts;
  /** Extra route plugins registered after the built-in ones (tests). */
  routes?: RoutePlugin[];
}

export async function buildApp(deps: AppDeps): Promise<FastifyInstance> {
  const parts = deps.parts ?? { api: true, ingest: true };
  const routes: RoutePlugin[] = [];
  if (parts.api) routes.push(apiRoutes);
  if (parts.ingest) routes.push(ingestRoutes);
  routes.push(...(deps.routes ?? []));
  return buildHttpServer(deps, { routes, openapi: apiDocument() });
}
