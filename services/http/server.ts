/**
 * The HTTP server every route set runs in, whichever process serves it (ingest, the API, or
 * both in one). Reads like a table of contents: external plugins (security headers, rate
 * limit, OpenAPI), then Cansight's own (repositories, error envelope, the key guard), then the
 * health routes and the route sets the caller gives, in that order.
 */
import Fastify, { LogController, type FastifyInstance, type FastifyServerOptions } from 'fastify';
import helmet, { type FastifyHelmetOptions } from '@fastify/helmet';
import rateLimit from '@fastify/rate-limit';
import type { Config } from '../db/config.ts';
import type { Logger } from '../db/logger.ts';
import type { Pool } from '../db/pool.ts';
import { createKeysRepository } from '../db/keys.ts';
import { createUnitsRepository } from '../db/units.ts';
import { registerOpenApi, type OpenApiExtras } from './openapi.ts';
import { makeAjv } from './ajv.ts';
import { installErrorHandling } from './errors.ts';
import { authPlugin, bearerKeyHash } from './auth.ts';
import { healthRoutes } from './health.ts';
import { ErrorReply } from './schemas.ts';
import './context.ts';

/** The content policy of HTML and SVG replies other than the dashboard page: inline styles and data: images only. */
export const DOCUMENT_CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; frame-ancestors 'none'; base-uri 'none'; form-action 'none'";

export type RoutePlugin = (app: FastifyInstance) => Promise<void>;

export interface HttpDeps {
  config: Config;
  pool: Pool;
  logger: Logger;
}

export interface HttpServerOptions {
  /** Route sets registered after the health routes, in order. */
  routes: RoutePlugin[];
  /** What the OpenAPI document carries beyond the route schemas: recorded examples, webhooks. */
  openapi?: OpenApiExtras;
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

export async function buildHttpServer(deps: HttpDeps, opts: HttpServerOptions): Promise<FastifyInstance> {
  const app = Fastify({
    loggerInstance: deps.logger as FastifyServerOptions['loggerInstance'],
    bodyLimit: deps.config.ingest.bodyLimitBytes,
    // A hop count is given as the function proxy-addr makes of it (fastify's types take no number).
    trustProxy: typeof deps.config.trustProxy === 'number' ? ((hops: number) => (_addr: string, hop: number) => hop < hops)(deps.config.trustProxy) : deps.config.trustProxy,
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

  // Cansight's repositories, before the plugins that need them.
  app.decorate('pool', deps.pool);
  app.decorate('appConfig', deps.config);
  app.decorate('repos', { units: createUnitsRepository(deps.pool), keys: createKeysRepository(deps.pool) });

  // External plugins. Helmet's headers are worked out once (see securityHeaders).
  const security = await securityHeaders({ contentSecurityPolicy: false });
  app.addHook('onRequest', (_request, reply, done) => {
    for (const [name, value] of security) reply.raw.setHeader(name, value);
    done();
  });
  // Every HTML and SVG reply carries a content policy: no script, nothing loaded from elsewhere
  // (the dashboard page sets its own, which allows its one script).
  app.addHook('onSend', (_request, reply, payload, done) => {
    const type = String(reply.getHeader('content-type') ?? '');
    if (/^(text\/html|image\/svg\+xml)/i.test(type) && !reply.hasHeader('content-security-policy')) reply.header('content-security-policy', DOCUMENT_CSP);
    done(null, payload);
  });
  // The limit runs before the key guard (whose hook is added to each route after it, see
  // authPlugin): a request counts against its key once that key has been a live key in this
  // process, and against the client address otherwise (no key, an unknown or a wrong one).
  // So guessing keys is limited per address, and made-up values cannot fill the limiter with
  // buckets of their own and push out those of real keys.
  await app.register(rateLimit, {
    max: (_req, bucket) => (bucket.startsWith('k:') ? deps.config.rateLimitPerMinute : deps.config.rateLimitAnonPerMinute),
    timeWindow: '1 minute',
    cache: deps.config.rateLimitBuckets,
    keyGenerator: (req) => {
      const hash = bearerKeyHash(req);
      return hash && app.repos.keys.isProven(hash) ? 'k:' + hash.slice(0, 16) : 'ip:' + req.ip;
    },
  });
  await registerOpenApi(app, opts.openapi ?? {});

  // Cansight's own plugins.
  app.addSchema(ErrorReply);
  installErrorHandling(app);
  await app.register(authPlugin);

  // Routes.
  await app.register(healthRoutes);
  app.get('/openapi.json', { schema: { hide: true }, config: { access: 'public' } }, async () => app.swagger());
  for (const r of opts.routes) await app.register(r);
  return app;
}
