/**
 * Builds the HTTP application. Reads like a table of contents: external plugins (security
 * headers, rate limit, OpenAPI), then Cansight's own (repositories, error envelope, the key
 * guard), then routes. `parts` chooses what this process serves: the read/act API, ingest, or
 * both (cansight start).
 */
import Fastify, { LogController, type FastifyInstance, type FastifyServerOptions } from 'fastify';
import helmet, { type FastifyHelmetOptions } from '@fastify/helmet';
import rateLimit from '@fastify/rate-limit';
import swagger from '@fastify/swagger';
import swaggerUi from '@fastify/swagger-ui';
import { Ajv } from 'ajv';
import addFormats from 'ajv-formats';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import type { Pool } from '../db/pool.ts';
import { createKeysRepository } from '../db/keys.ts';
import { createUnitsRepository } from '../db/units.ts';
import { installErrorHandling } from './errors.ts';
import { authPlugin, bearerKeyHash } from './auth.ts';
import { healthRoutes } from './routes/health.ts';
import { unitRoutes } from './routes/units.ts';
import { alertRoutes } from './routes/alerts.ts';
import { workerRoutes } from './routes/status.ts';
import { dashboardRoutes } from './routes/dashboard.ts';
import { ingestRoutes } from '../ingest/routes.ts';
import { fleetRoutes } from './routes/fleet.ts';
import { analysisRoutes } from './routes/analysis.ts';
import { chamberRoutes } from './routes/chambers.ts';
import { thermocoupleRoutes } from './routes/thermocouples.ts';
import { pictureRoutes } from './routes/pictures.ts';
import { reviewRoutes } from './routes/review.ts';
import { swirlRoutes } from './routes/swirl.ts';
import { startRoutes } from './routes/starts.ts';
import { ErrorReply } from './schemas.ts';
import './context.ts';

export interface AppParts {
  api: boolean;
  ingest: boolean;
}

export interface AppDeps {
  config: Config;
  pool: Pool;
  logger: Logger;
  parts?: AppParts;
  /** Extra route plugins registered after the built-in ones (ingest, worker-backed routes). */
  routes?: Array<(app: FastifyInstance) => Promise<void>>;
}

function makeAjv(coerce: boolean) {
  const ajv = new Ajv({ allErrors: false, coerceTypes: coerce ? 'array' : false, removeAdditional: false, useDefaults: true, strict: false });
  addFormats.default(ajv);
  return ajv;
}

/**
 * The security headers @fastify/helmet sets with these options, asked of the plugin once on a
 * throwaway instance. With no per-route options and no nonces they are the same on every reply;
 * the plugin itself builds helmet's middleware again on every request.
 */
async function securityHeaders(options: FastifyHelmetOptions): Promise<Array<[string, number | string | string[]]>> {
  const probe = Fastify();
  await probe.register(helmet, options);
  let headers: Array<[string, number | string | string[]]> = [];
  probe.get('/', async (_request, reply) => {
    headers = Object.entries(reply.raw.getHeaders()).filter((e): e is [string, number | string | string[]] => e[1] !== undefined);
    return '';
  });
  await probe.inject({ url: '/' });
  await probe.close();
  if (headers.length === 0) throw new Error('@fastify/helmet set no headers on a probe request');
  return headers;
}

export async function buildApp(deps: AppDeps): Promise<FastifyInstance> {
  const parts = deps.parts ?? { api: true, ingest: true };
  const app = Fastify({
    loggerInstance: deps.logger as FastifyServerOptions['loggerInstance'],
    bodyLimit: deps.config.ingest.bodyLimitBytes,
    connectionTimeout: 0,
    requestTimeout: 300_000,
    keepAliveTimeout: 72_000,
    // One line per event that matters (errors, refusals, stored rings), not two per request.
    logController: new LogController({ disableRequestLogging: true }),
  });

  // Bodies are validated strictly (no coercion, unknown fields refused by the schemas);
  // query strings and path parameters are text, so those coerce to the declared types.
  const strict = makeAjv(false);
  const lenient = makeAjv(true);
  app.setValidatorCompiler(({ schema, httpPart }) => (httpPart === 'body' ? strict : lenient).compile(schema as object) as never);

  // External plugins. Helmet's headers are worked out once (see securityHeaders).
  const security = await securityHeaders({ contentSecurityPolicy: false });
  app.addHook('onRequest', (_request, reply, done) => {
    for (const [name, value] of security) reply.raw.setHeader(name, value);
    done();
  });
  await app.register(rateLimit, {
    max: deps.config.rateLimitPerMinute,
    timeWindow: '1 minute',
    keyGenerator: (req) => {
      const hash = bearerKeyHash(req);
      return hash ? 'k:' + hash.slice(0, 16) : 'ip:' + req.ip;
    },
  });
  await app.register(swagger, {
    openapi: {
      info: { title: 'Cansight API', version: '1', description: 'Exhaust-ring monitoring of gas turbine fleets. Cansight advises; the turbine\'s own protection and the site\'s procedures govern.' },
      components: { securitySchemes: { bearer: { type: 'http', scheme: 'bearer' } } },
      security: [{ bearer: [] }],
    },
  });
  await app.register(swaggerUi, { routePrefix: '/docs' });

  // Cansight's own plugins.
  app.decorate('pool', deps.pool);
  app.decorate('appConfig', deps.config);
  app.decorate('repos', { units: createUnitsRepository(deps.pool), keys: createKeysRepository(deps.pool) });
  app.addSchema(ErrorReply);
  installErrorHandling(app);
  await app.register(authPlugin);

  // Routes.
  await app.register(healthRoutes);
  app.get('/openapi.json', { schema: { hide: true }, config: { access: 'public' } }, async () => app.swagger());
  if (parts.api) await app.register(unitRoutes);
  if (parts.api) await app.register(alertRoutes);
  if (parts.api) await app.register(workerRoutes);
  if (parts.api) await app.register(dashboardRoutes);
  if (parts.api) await app.register(fleetRoutes);
  if (parts.api) await app.register(analysisRoutes);
  if (parts.api) await app.register(chamberRoutes);
  if (parts.api) await app.register(thermocoupleRoutes);
  if (parts.api) await app.register(pictureRoutes);
  if (parts.api) await app.register(reviewRoutes);
  if (parts.api) await app.register(swirlRoutes);
  if (parts.api) await app.register(startRoutes);
  if (parts.ingest) await app.register(ingestRoutes);
  for (const r of deps.routes ?? []) await app.register(r);
  return app;
}
