/**
 * The error envelope of every 4xx/5xx reply: { error, message, details? }. HttpError carries a
 * status and a code from route code; installErrorHandling maps Fastify's own errors (schema
 * validation, body too large, wrong content type, bad JSON) and an unreachable database onto
 * the same envelope.
 */
import type { FastifyError, FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { isDatabaseUnavailable } from '../db/pool.ts';

export interface ErrorBody {
  error: string;
  message: string;
  details?: unknown[];
}

export class HttpError extends Error {
  constructor(
    public readonly statusCode: number,
    public readonly code: string,
    message: string,
    public readonly details?: unknown[],
  ) {
    super(message);
    this.name = 'HttpError';
  }
}

export const badRequest = (message: string, details?: unknown[]) => new HttpError(400, 'bad_request', message, details);
export const notFound = (message: string) => new HttpError(404, 'not_found', message);
export const conflict = (message: string) => new HttpError(409, 'conflict', message);
export const unprocessable = (message: string, details?: unknown[]) => new HttpError(422, 'invalid', message, details);

interface ValidationItem {
  keyword?: string;
  instancePath?: string;
  message?: string;
  params?: Record<string, unknown>;
}

const PLACE: Record<string, string> = { body: 'Body', querystring: 'Query', params: 'Path', headers: 'Header' };

export const BODY_REQUIRED = 'A JSON body is required: send the request\'s fields as a JSON object with Content-Type: application/json.';

/** One reason per field, in words a person can act on (the allowed values of an enum, not one line per value). */
function reasonFor(group: ValidationItem[]): string {
  const allowed: unknown[] = [];
  for (const v of group) {
    if (v.keyword === 'const' && v.params && 'allowedValue' in v.params) allowed.push(v.params.allowedValue);
    if (v.keyword === 'enum' && Array.isArray(v.params?.allowedValues)) allowed.push(...(v.params!.allowedValues as unknown[]));
  }
  if (allowed.length > 0) return `must be one of ${[...new Set(allowed)].map((x) => JSON.stringify(x)).join(', ')}`;
  const v = group.find((x) => x.keyword !== 'anyOf' && x.keyword !== 'oneOf') ?? group[0];
  if (v.keyword === 'format' && v.params?.format === 'date-time') return 'must be an RFC 3339 time with offset, e.g. 2026-03-01T10:00:00Z';
  if (v.keyword === 'anyOf' || v.keyword === 'oneOf') return 'does not match any of the allowed forms';
  return v.message ?? 'invalid';
}

function describeValidation(err: FastifyError): { message: string; details: { field: string; reason: string }[] } {
  const items = (err.validation ?? []) as ValidationItem[];
  const where = err.validationContext ?? 'request';
  if (where === 'body' && items.some((v) => !v.instancePath && v.keyword === 'type')) {
    return { message: BODY_REQUIRED, details: [{ field: 'body', reason: 'required: a JSON object' }] };
  }
  // Ajv reports an enum written as a union of constants as one error per constant plus one
  // for the union; group by field so that each field gets one reason.
  const groups = new Map<string, ValidationItem[]>();
  const named: { field: string; reason: string }[] = [];
  for (const v of items) {
    const field = (v.instancePath ?? '').replace(/^\//, '').replace(/\//g, '.');
    if (v.params && typeof v.params.additionalProperty === 'string') {
      named.push({ field: field ? `${field}.${v.params.additionalProperty}` : v.params.additionalProperty, reason: 'unknown field' });
    } else if (v.params && typeof v.params.missingProperty === 'string') {
      named.push({ field: field ? `${field}.${v.params.missingProperty}` : v.params.missingProperty, reason: 'required' });
    } else {
      const key = field || where;
      groups.set(key, [...(groups.get(key) ?? []), v]);
    }
  }
  const details = [...named, ...[...groups].map(([field, group]) => ({ field, reason: reasonFor(group) }))];
  const first = details[0];
  if (!first) return { message: err.message, details };
  const more = details.length > 1 ? ` (and ${details.length - 1} more in details)` : '';
  return { message: `${PLACE[where] ?? 'Request'} field "${first.field}": ${first.reason}${more}.`, details };
}

/** What the error handler knows of the request, for messages that name a limit. */
export interface ErrorContext {
  /** The body limit of the route, bytes. */
  bodyLimit?: number;
  /** True for the ring routes, which also take NDJSON and CSV (and whose way out of a 413 is to stream). */
  rings?: boolean;
  /** The request's media type, without parameters. */
  contentType?: string;
}

function bodyTooLarge(ctx: ErrorContext): string {
  const limit = ctx.bodyLimit ? `${ctx.bodyLimit} bytes (${(ctx.bodyLimit / 1048576).toFixed(ctx.bodyLimit >= 1048576 ? 0 : 2)} MiB, CANSIGHT_BODY_LIMIT_BYTES)` : 'the limit of this endpoint';
  const way = ctx.rings
    ? 'Send smaller batches, or stream the rings as NDJSON (application/x-ndjson, to POST /v1/rings) or CSV (text/csv), which are read line by line with no limit on the whole body.'
    : 'Send a smaller body.';
  return `The request body is larger than ${limit}; nothing was stored. ${way}`;
}

export function toErrorReply(err: unknown, ctx: ErrorContext = {}): { status: number; body: ErrorBody } {
  if (err instanceof HttpError) {
    return { status: err.statusCode, body: { error: err.code, message: err.message, ...(err.details ? { details: err.details } : {}) } };
  }
  const fe = err as FastifyError;
  if (fe && fe.validation) {
    const { message, details } = describeValidation(fe);
    return { status: 400, body: { error: 'bad_request', message, details } };
  }
  switch (fe?.code) {
    case 'FST_ERR_CTP_BODY_TOO_LARGE':
      return { status: 413, body: { error: 'too_large', message: bodyTooLarge(ctx) } };
    case 'FST_ERR_CTP_INVALID_MEDIA_TYPE':
      return { status: 415, body: { error: 'unsupported_media_type', message: `Content-Type ${ctx.contentType ?? '(none)'} is not taken here; send ${ctx.rings ? 'application/json, text/csv or application/x-ndjson' : 'application/json'}.` } };
    case 'FST_ERR_CTP_EMPTY_JSON_BODY':
      return { status: 400, body: { error: 'bad_request', message: BODY_REQUIRED, details: [{ field: 'body', reason: 'required: a JSON object' }] } };
    case 'FST_ERR_CTP_INVALID_JSON_BODY':
      return { status: 400, body: { error: 'bad_request', message: `The body is not valid JSON: ${fe.message}` } };
  }
  if (isDatabaseUnavailable(err)) {
    return { status: 503, body: { error: 'database_unavailable', message: 'The database is unavailable; nothing was stored. Retry later.' } };
  }
  // Two writers of the same rows met and PostgreSQL rolled one back (deadlock, serialization
  // failure): the whole request's transaction is undone, and the same request will go through.
  const code = (err as { code?: string } | null)?.code;
  if (code === '40P01' || code === '40001') {
    return { status: 503, body: { error: 'write_conflict', message: 'A concurrent write to the same rows was in the way; nothing was stored. Retry the request.' } };
  }
  const status = typeof fe?.statusCode === 'number' && fe.statusCode >= 400 && fe.statusCode < 600 ? fe.statusCode : 500;
  if (status === 429) return { status, body: { error: 'rate_limited', message: fe.message } };
  if (status < 500) return { status, body: { error: 'bad_request', message: fe.message } };
  return { status, body: { error: 'internal', message: 'An internal error occurred; it has been logged.' } };
}

/**
 * True when the client really went away: its connection is closed (nobody is there to read an
 * answer) and the request body was cut off by it (Node's "aborted" reset, a premature close).
 * Neither half alone is enough. When a route stops reading early (a refusal, or a database
 * failure mid-stream) Node marks the request aborted although the client still waits for the
 * answer, and a body read to the end has its stream destroyed once consumed; and a database
 * connection reset carries the same ECONNRESET code as a client's.
 */
function clientWentAway(err: unknown, request: FastifyRequest, reply: FastifyReply): boolean {
  if (err instanceof HttpError) return false;
  const socket = reply.raw.socket;
  if (!socket || !socket.destroyed) return false;
  const e = err as { code?: string; message?: string } | null;
  const cutOff = (e?.code === 'ECONNRESET' && e.message === 'aborted') || e?.code === 'ERR_STREAM_PREMATURE_CLOSE' || e?.code === 'ECONNABORTED';
  return cutOff || request.raw.aborted;
}

export function installErrorHandling(app: FastifyInstance): void {
  app.setErrorHandler((err, request, reply) => {
    if (clientWentAway(err, request, reply)) {
      // Nothing was stored (one transaction per request) and nobody is there to answer.
      request.log.info({ url: request.url, code: (err as { code?: string }).code }, 'client closed the connection before the request ended; nothing stored');
      return reply.status(400).send({ error: 'bad_request', message: 'The request ended before its body was complete.' });
    }
    const { status, body } = toErrorReply(err, { bodyLimit: request.routeOptions.bodyLimit, rings: /\/rings(\?|$)/.test(request.url), contentType: request.headers['content-type']?.split(';')[0].trim() });
    // request.log carries the request id (reqId); a 500 names it so an operator can find the line.
    if (status >= 500) {
      request.log.error({ err, url: request.url, status, error: body.error }, 'request failed');
      if (body.error === 'internal') body.message = `An internal error occurred; it has been logged as request ${request.id}.`;
    } else request.log.info({ status, error: body.error, reason: body.message }, 'request refused');
    return reply.status(status).send(body);
  });
  app.setNotFoundHandler((request, reply) => {
    return reply.status(404).send({ error: 'not_found', message: `No route ${request.method} ${request.url.split('?')[0]}` });
  });
}

export const tooLarge = (message: string) => new HttpError(413, 'too_large', message);
export const unsupportedMediaType = (message: string) => new HttpError(415, 'unsupported_media_type', message);

/** A span of seconds in words for messages: "7 days", "1.5 days", "36 h", "90 s". */
export function formatDuration(seconds: number): string {
  const round1 = (x: number) => Math.round(x * 10) / 10;
  if (seconds >= 86_400) {
    const d = round1(seconds / 86_400);
    return `${d} day${d === 1 ? '' : 's'}`;
  }
  if (seconds >= 3_600) return `${round1(seconds / 3_600)} h`;
  if (seconds >= 60) return `${round1(seconds / 60)} min`;
  return `${Math.round(seconds)} s`;
}
