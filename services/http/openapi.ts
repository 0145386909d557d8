/**
 * The OpenAPI document (GET /openapi.json, browsable at /docs), generated from the route
 * schemas of whatever route sets the server runs. Three things are added to each operation as
 * the document is made, never to the schemas the server validates with:
 * - who may call it: the roles its `config.access` admits, in words and as `x-roles`;
 * - an example request and reply, when the caller gives one recorded for it;
 * - a note the caller gives for it (e.g. which addresses POST /v1/webhooks takes).
 * The caller may also give the document's `webhooks` (OpenAPI 3.1): what the service POSTs.
 */
import type { FastifyInstance, FastifySchema, RouteOptions } from 'fastify';
import swagger from '@fastify/swagger';
import swaggerUi from '@fastify/swagger-ui';
import { ACCESS_ROLES, type Access } from './context.ts';

/** One recorded example of an operation. */
export interface RecordedExample {
  request?: unknown;
  /** The media type of a request body sent as text (a stream route has no body schema). */
  requestType?: string;
  status: number;
  reply: unknown;
}

/** What the document carries beyond the route schemas. */
export interface OpenApiExtras {
  /** Recorded examples by exampleKey ("METHOD /route/:param"). */
  examples?: Record<string, RecordedExample>;
  /** Text added to an operation's description, by exampleKey. */
  notes?: Record<string, string>;
  /** The document's `webhooks` object. */
  webhooks?: Record<string, unknown>;
}

export const exampleKey = (method: string, url: string) => `${method.toUpperCase()} ${url}`;

function rolesOf(access: Access | undefined): { words: string; roles: string[] } {
  if (!access || access === 'public') return { words: 'Anyone: no key is needed.', roles: [] };
  const roles = [...ACCESS_ROLES[access]];
  return { words: `Who may call: a key with role ${roles.join(', ')}${access === 'ingest' || access === 'read' || access === 'act' ? ' (a key limited to some units reaches those units only)' : ''}.`, roles };
}

const withExample = (schema: unknown, example: unknown) => (schema && typeof schema === 'object' ? { ...(schema as object), examples: [example] } : schema);

/** Adds roles, the example and the note of one operation to the document. */
export function documentRoute(schema: FastifySchema, route: RouteOptions, extras: OpenApiExtras): FastifySchema {
  const method = Array.isArray(route.method) ? route.method[0] : route.method;
  const key = exampleKey(method, route.url);
  const { words, roles } = rolesOf(route.config?.access as Access | undefined);
  const note = extras.notes?.[key];
  const out: Record<string, unknown> = { ...schema, description: [schema.description, words].filter(Boolean).join('\n\n') + (note ? `\n\n${note}` : ''), 'x-roles': roles };
  const ex = extras.examples?.[key];
  if (ex) {
    if (ex.request !== undefined && schema.body) out.body = withExample(schema.body, ex.request);
    else if (typeof ex.request === 'string' && ex.requestType) {
      out.body = { type: 'string', description: `the body as text (${ex.requestType})`, examples: [ex.request] };
      out.consumes = [ex.requestType];
    }
    const response = schema.response as Record<string, unknown> | undefined;
    if (response && response[String(ex.status)]) out.response = { ...response, [String(ex.status)]: withExample(response[String(ex.status)], ex.reply) };
  }
  return out as FastifySchema;
}

/**
 * OpenAPI 3.1 speaks JSON Schema 2020-12, where a tuple is `prefixItems`; the route schemas
 * (validated by Ajv's draft-07 default) write it as an `items` list. Rewrites every such
 * tuple in the document, in place.
 */
export function tuplesAs2020(node: unknown): unknown {
  if (Array.isArray(node)) node.forEach(tuplesAs2020);
  else if (node && typeof node === 'object') {
    const s = node as Record<string, unknown>;
    if (Array.isArray(s.items)) {
      s.prefixItems = s.items;
      if (s.additionalItems === false) s.items = false;
      else delete s.items;
      delete s.additionalItems;
    }
    for (const v of Object.values(s)) tuplesAs2020(v);
  }
  return node;
}

export async function registerOpenApi(app: FastifyInstance, extras: OpenApiExtras): Promise<void> {
  await app.register(swagger, {
    openapi: {
      openapi: '3.1.0',
      info: {
        title: 'Cansight API',
        version: '1',
        description:
          "Exhaust-ring monitoring of gas turbine fleets. Every request but /health and /ready sends `Authorization: Bearer <key>`; each operation says which roles may call it. Times are RFC 3339 with an offset, temperatures °C unless a field name says otherwise, angles degrees, chambers and thermocouples numbered from 1. Errors are `{ error, message, details? }`. Cansight advises; the turbine's own protection and the site's procedures govern.",
      },
      components: { securitySchemes: { bearer: { type: 'http', scheme: 'bearer' } } },
      security: [{ bearer: [] }],
      ...(extras.webhooks ? { webhooks: extras.webhooks } : {}),
    } as never,
    transform: ({ schema, url, route }) => ({ schema: schema ? documentRoute(schema, route, extras) : schema, url }),
    transformObject: (d) => tuplesAs2020(structuredClone('openapiObject' in d ? d.openapiObject : d.swaggerObject)) as never,
  });
  await app.register(swaggerUi, { routePrefix: '/docs' });
}
