/**
 * The error envelope of every 4xx/5xx reply: { error, message, details? }. HttpError carries a
 * status and a code from route code; installErrorHandling maps Fastify's own errors (schema
 * validation, body too large, wrong content type, bad JSON) and an unreachable database onto
 * the same envelope.
 */
import type { FastifyError, FastifyInstance } from 'fastify';
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
  instancePath?: string;
  message?: string;
  params?: Record<string, unknown>;
}

function describeValidation(err: FastifyError): { message: string; details: unknown[] } {
  const items = (err.validation ?? []) as ValidationItem[];
  const where = err.validationContext ?? 'request';
  const details = items.map((v) => {
    let field = (v.instancePath ?? '').replace(/^\//, '').replace(/\//g, '.');
    if (v.params && typeof v.params.additionalProperty === 'string') {
      field = field ? `${field}.${v.params.additionalProperty}` : v.params.additionalProperty;
      return { field, reason: 'unknown field' };
    }
    if (v.params && typeof v.params.missingProperty === 'string') {
      field = field ? `${field}.${v.params.missingProperty}` : v.params.missingProperty;
      return { field, reason: 'required' };
    }
    return { field: field || where, reason: v.message ?? 'invalid' };
  });
  const first = details[0] as { field: string; reason: string } | undefined;
  const message = first ? `${where} ${first.field}: ${first.reason}` : err.message;
  return { message, details };
}

export function toErrorReply(err: unknown): { status: number; body: ErrorBody } {
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
      return { status: 413, body: { error: 'too_large', message: 'The request body is larger than this endpoint accepts; send smaller batches.' } };
    case 'FST_ERR_CTP_INVALID_MEDIA_TYPE':
      return { status: 415, body: { error: 'unsupported_media_type', message: fe.message } };
    case 'FST_ERR_CTP_EMPTY_JSON_BODY':
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

/** True when the client closed the connection before the request body ended. */
function clientWentAway(err: unknown, rawAborted: boolean): boolean {
  const code = (err as { code?: string } | null)?.code;
  return rawAborted || code === 'ECONNRESET' || code === 'ERR_STREAM_PREMATURE_CLOSE' || code === 'ECONNABORTED';
}

export function installErrorHandling(app: FastifyInstance): void {
  app.setErrorHandler((err, request, reply) => {
    if (clientWentAway(err, request.raw.aborted || request.raw.destroyed) && !isDatabaseUnavailable(err)) {
      // Nothing was stored (one transaction per request) and nobody is there to answer.
      request.log.info({ url: request.url }, 'client closed the connection before the request ended; nothing stored');
      return reply.status(400).send({ error: 'bad_request', message: 'The request ended before its body was complete.' });
    }
    const { status, body } = toErrorReply(err);
    if (status >= 500) request.log.error({ err }, 'request failed');
    else request.log.info({ status, error: body.error, reason: body.message }, 'request refused');
    return reply.status(status).send(body);
  });
  app.setNotFoundHandler((request, reply) => {
    return reply.status(404).send({ error: 'not_found', message: `No route ${request.method} ${request.url.split('?')[0]}` });
  });
}

export const tooLarge = (message: string) => new HttpError(413, 'too_large', message);
export const unsupportedMediaType = (message: string) => new HttpError(415, 'unsupported_media_type', message);
