/**
 * The ring endpoints (role ingest or admin):
 *   POST /v1/units/:unitId/rings  application/json  { rings: [...] }, at most maxBatchRings
 *                                  text/csv          header row, then one ring per row (streamed)
 *                                  application/x-ndjson  one ring per line for this unit (streamed)
 *   POST /v1/rings                 application/x-ndjson  one ring per line, each with unitId (streamed)
 *
 * Reply 200 { accepted, duplicates, rejected: [{ index, field, reason }], rejectedCount }:
 * index is the array index from 0 in a JSON batch, the line number from 1 in NDJSON, the data
 * row from 1 in CSV (the header is row 0). Everything one request stores commits in one
 * transaction, after the whole body is read: a 2xx means every accepted ring is committed; an
 * error or a broken connection leaves nothing stored.
 *
 * Whole-request answers: 400 a body that is not the documented shape (not JSON, no "rings"
 * list, no NDJSON line that is JSON); 404 the unit of the URL is not registered; 413 a body
 * over the byte limit, a batch over maxBatchRings, or one line over the line limit; 415 any
 * other content type; 422 a well-formed request of which nothing could be stored: every ring
 * was rejected (details lists them) or the CSV header is unusable; 503 the database is
 * unavailable (nothing was stored; a retry is safe).
 *
 * Unit scope: a key limited to some units gets 403 for any other unit in the URL; on the
 * NDJSON stream a line naming a unit outside the key's scope is rejected by its line number,
 * and the lines for the key's own units are stored.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import type { FastifyValidationResult } from 'fastify/types/schema.js';
import type { Readable } from 'node:stream';
import { badRequest, notFound, tooLarge, unprocessable, unsupportedMediaType } from '../http/errors.ts';
import { keyCoversUnit } from '../http/auth.ts';
import { ErrorReply } from '../http/schemas.ts';
import type { Config } from '../db/config.ts';
import { IngestRun, type IngestTally } from './run.ts';
import { StreamGate } from './stream-gate.ts';
import { ingestCsv, ingestNdjson, type StreamIngestOptions } from './streams.ts';
import { RingBatchBytes, readRingBatch } from './ring-bytes.ts';
import { isRejection, thermocoupleCounter, validateRing, type ValidationContext } from './validate.ts';
import { IngestReply, RingBatchBody, UnitRingsParams } from './schemas.ts';

const UNIT_ID_RE = /^[a-z0-9-]{1,40}$/;
const NDJSON_TYPES = ['application/x-ndjson', 'application/ndjson'];
const STREAM_TYPES = ['text/csv', ...NDJSON_TYPES];

function mediaType(request: FastifyRequest): string {
  return (request.headers['content-type'] ?? '').split(';')[0].trim().toLowerCase();
}

function isStream(v: unknown): v is Readable {
  return typeof v === 'object' && v !== null && typeof (v as Readable).pipe === 'function';
}

/**
 * Route validator: the unit id of the URL must look like one; bodies pass through (a batch is
 * checked ring by ring in the handler, a stream as it is read).
 */
function validatorCompiler({ httpPart }: { httpPart?: string }): FastifyValidationResult {
  if (httpPart !== 'params') return () => true;
  const check = ((data: unknown): boolean => {
    const id = (data as { unitId?: unknown } | null)?.unitId;
    if (typeof id === 'string' && UNIT_ID_RE.test(id)) return true;
    check.errors = [{ keyword: 'pattern', instancePath: '/unitId', schemaPath: '#/properties/unitId/pattern', params: {}, message: 'is not a unit id (lower-case letters, digits and dashes, 1–40)' }];
    return false;
  }) as FastifyValidationResult;
  return check;
}

const errors = { 400: ErrorReply, 401: ErrorReply, 403: ErrorReply, 404: ErrorReply, 408: ErrorReply, 413: ErrorReply, 415: ErrorReply, 422: ErrorReply, 429: ErrorReply, 503: ErrorReply };

/** 422 when rings were sent and not one of them could be stored. */
function assertSomethingUsable(t: IngestTally, what: string): void {
  if (t.accepted + t.duplicates === 0 && t.rejectedCount > 0) {
    const first = t.rejected[0];
    throw unprocessable(
      `None of the ${t.rejectedCount} ${what} could be stored; the first problem: ${what === 'rings' ? 'index' : what === 'lines' ? 'line' : 'row'} ${first.index}, ${first.field} ${first.reason}. Details list each rejected one.`,
      t.rejected,
    );
  }
}

function streamOptions(config: Config, run: IngestRun): Omit<StreamIngestOptions, 'mayWrite' | 'defaultUnitId'> {
  return {
    run,
    nowMs: Date.now(),
    futureToleranceS: config.ingest.futureToleranceS,
    bounds: config.ingest.bounds,
    lineLimitBytes: config.ingest.lineLimitBytes,
  };
}

/** Runs `work` on a fresh IngestRun and commits; on any failure nothing of it is kept. */
async function withRun(config: Config, app: FastifyInstance, work: (run: IngestRun) => Promise<void>): Promise<IngestTally> {
  const run = new IngestRun(app.pool, { chunkRings: config.ingest.chunkRings });
  try {
    await work(run);
    return await run.finish();
  } catch (err) {
    await run.abort();
    throw err;
  }
}

export async function ingestRoutes(app: FastifyInstance): Promise<void> {
  const config = app.appConfig;
  const gate = new StreamGate(config.ingest.streams);
  /** Reads a stream body within the gate's limits: a place for its key, and an end to a stalled body. */
  async function gated<T>(request: FastifyRequest, reply: FastifyReply, stream: Readable, work: (source: AsyncIterable<Buffer | string>) => Promise<T>): Promise<T> {
    let leave: () => void;
    try {
      leave = gate.enter(request.principal?.id ?? 'none');
    } catch (err) {
      reply.header('retry-after', '1');
      throw err;
    }
    try {
      return await work(gate.watched(stream));
    } finally {
      leave();
    }
  }

  // Streamed types: the handler reads the raw request stream itself, a chunk at a time.
  app.addContentTypeParser(STREAM_TYPES, (_request, payload, done) => done(null, payload));

  // JSON: a body of the form { "rings": [ {…}, … ] } whose rings hold only ring fields and
  // scalar values is read here straight from its bytes (RingBatchBytes); any other body goes to
  // Fastify's own JSON parser, with its answers.
  const defaultJson = app.getDefaultJsonParser(app.initialConfig.onProtoPoisoning ?? 'error', app.initialConfig.onConstructorPoisoning ?? 'error');
  app.addContentTypeParser('application/json', { parseAs: 'buffer', bodyLimit: config.ingest.bodyLimitBytes }, (request, body, done) => {
    const buf = body as Buffer;
    const read = readRingBatch(buf);
    if (read !== null) done(null, read);
    else defaultJson(request, buf.toString('utf8'), done);
  });

  async function batch(unitId: string, body: unknown, request: FastifyRequest): Promise<IngestTally> {
    let rings: unknown[] | null = null;
    let count: number;
    if (body instanceof RingBatchBytes) count = body.length;
    else {
      if (typeof body !== 'object' || body === null || Array.isArray(body)) throw badRequest('The body must be a JSON object: { "rings": [ ... ] }.');
      const extra = Object.keys(body).filter((k) => k !== 'rings');
      if (extra.length) throw badRequest(`The body has an unknown field "${extra[0]}"; it holds only "rings".`);
      const list = (body as { rings?: unknown }).rings;
      if (!Array.isArray(list)) throw badRequest('The body must have "rings": a list of rings.');
      rings = list;
      count = list.length;
    }
    if (count > config.ingest.maxBatchRings) {
      throw tooLarge(`The batch holds ${count} rings; at most ${config.ingest.maxBatchRings} go in one request (CANSIGHT_MAX_BATCH_RINGS); nothing was stored. Split it into smaller batches, or stream the rings as NDJSON (application/x-ndjson, to POST /v1/rings) or CSV (text/csv), which take any number of rings.`);
    }
    const versions = await app.repos.units.versions(unitId);
    if (versions.length === 0) throw notFound(`No unit ${unitId} is registered.`);
    const ctx: ValidationContext = {
      nowMs: Date.now(),
      futureToleranceS: config.ingest.futureToleranceS,
      bounds: config.ingest.bounds,
      thermocoupleCount: thermocoupleCounter(versions),
    };
    const tally = await withRun(config, app, async (run) => {
      if (rings !== null) {
        for (let i = 0; i < rings.length; i++) {
          const v = validateRing(rings[i], unitId, ctx);
          if (isRejection(v)) run.reject(i, v.field, v.reason);
          else if (run.add(v)) await run.flush();
        }
        return;
      }
      // Rings read from the bytes are checked here; any other ring is parsed and validated alone.
      const { body: buf, starts, ends, fast, reader } = body as RingBatchBytes;
      for (let i = 0; i < starts.length; i++) {
        if (fast[i] === 1) {
          reader.load(buf, i);
          if ((!reader.namesUnit || reader.unitId() === unitId) && reader.check(unitId, ctx)) {
            if (run.add(reader.row)) await run.flush();
            continue;
          }
        }
        const v = validateRing(JSON.parse(buf.toString('utf8', starts[i], ends[i])), unitId, ctx);
        if (isRejection(v)) run.reject(i, v.field, v.reason);
        else if (run.add(v)) await run.flush();
      }
    });
    if (rings === null) (body as RingBatchBytes).release();
    assertSomethingUsable(tally, 'rings');
    request.log.info({ unitId, accepted: tally.accepted, duplicates: tally.duplicates, rejected: tally.rejectedCount }, 'rings stored');
    return tally;
  }

  app.post('/v1/units/:unitId/rings', {
    schema: {
      tags: ['ingest'],
      summary: 'Store rings of one unit: a JSON batch, or a CSV or NDJSON stream',
      description: 'application/json: { rings: [...] } (index in replies from 0). text/csv: header ts,load_mw,ambient_c,ambient_kpa,speed_pct,tc1,…,tcM (tcN_f for °F, tcN_mv for Type K mV with cold_junction_c; optional cdt_c, cdp_kpa, fuel_flow_kg_s, flame_detected, mode); rows numbered from 1. application/x-ndjson: one ring per line (unitId optional). One transaction per request.',
      params: UnitRingsParams,
      body: RingBatchBody,
      response: { 200: IngestReply, ...errors },
    },
    validatorCompiler,
    config: { access: 'ingest' },
  }, async (request, reply) => {
    const { unitId } = request.params as { unitId: string };
    const type = mediaType(request);
    if (type === 'application/json') return batch(unitId, request.body, request);
    if (!STREAM_TYPES.includes(type) || !isStream(request.body)) {
      throw unsupportedMediaType(`Content type "${type || 'none'}" is not taken here; send application/json, text/csv or application/x-ndjson.`);
    }
    const stream = request.body;
    const versions = await app.repos.units.versions(unitId);
    if (versions.length === 0) throw notFound(`No unit ${unitId} is registered.`);
    const isCsv = type === 'text/csv';
    const tally = await gated(request, reply, stream, (source) =>
      withRun(config, app, async (run) => {
        const o = { ...streamOptions(config, run), defaultUnitId: unitId };
        if (isCsv) await ingestCsv(source, unitId, thermocoupleCounter(versions), o);
        else await ingestNdjson(source, o);
      }),
    );
    assertSomethingUsable(tally, isCsv ? 'rows' : 'lines');
    request.log.info({ unitId, accepted: tally.accepted, duplicates: tally.duplicates, rejected: tally.rejectedCount }, 'rings stored');
    return tally;
  });

  app.post('/v1/rings', {
    schema: {
      tags: ['ingest'],
      summary: 'Store rings of many units as an NDJSON stream (one ring per line, each with unitId)',
      description: 'Content-Type application/x-ndjson. Read as a stream; every line is validated on its own and reported by its line number (from 1). A line for a unit outside the key\'s scope is rejected; the others are stored. One transaction per request.',
      response: { 200: IngestReply, ...errors },
    },
    config: { access: 'ingest' },
  }, async (request, reply) => {
    const type = mediaType(request);
    if (!NDJSON_TYPES.includes(type) || !isStream(request.body)) {
      throw unsupportedMediaType(`Content type "${type || 'none'}" is not taken here; send application/x-ndjson, one ring per line. (A JSON batch goes to POST /v1/units/:unitId/rings.)`);
    }
    const stream = request.body;
    const principal = request.principal;
    const tally = await gated(request, reply, stream, (source) =>
      withRun(config, app, async (run) => {
        await ingestNdjson(source, { ...streamOptions(config, run), mayWrite: (u) => principal === null || keyCoversUnit(principal, u) });
      }),
    );
    assertSomethingUsable(tally, 'lines');
    request.log.info({ accepted: tally.accepted, duplicates: tally.duplicates, rejected: tally.rejectedCount }, 'rings stored');
    return tally;
  });
}
