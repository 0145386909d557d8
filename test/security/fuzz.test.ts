/**
 * Property-based fuzzing (fast-check) of every parser that takes outside bytes: the JSON ring
 * batch reader, the NDJSON and CSV ring streams, the query parameters of every read route, the
 * unit configuration and the webhook bodies. Properties: no 5xx, no hang, the error envelope on
 * every refusal, nothing stored from a refused ring, every accepted ring stored exactly as sent.
 *
 * At least FUZZ_RUNS generated inputs per parser (default 10,000; set FUZZ_RUNS for more): for
 * the ring parsers an input is one ring, line or row, sent about 50 to a request; for the others
 * one request. The counts are printed.
 */
import { Readable } from 'node:stream';
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { readRingBatch } from '../../services/ingest/ring-bytes.ts';
import { isRejection, thermocoupleCounter, validateRing } from '../../services/ingest/validate.ts';
import { loadConfig } from '../../services/db/config.ts';

const RUNS = Math.max(1, Number(process.env.FUZZ_RUNS ?? 10_000));
/** Placeholder for "a fresh time", filled in as a request is sent. */
const TIME_LATER = '<time>';
let nextMinute = 0;
/** The records with every placeholder time replaced by a minute no ring has had yet. */
function timed<T extends { r: Record<string, unknown> }>(records: T[]): T[] {
  return records.map((x) => (x.r.ts === TIME_LATER ? { ...x, r: { ...x.r, ts: new Date(Date.UTC(2025, 0, 1) + nextMinute++ * 60_000).toISOString() } } : x));
}
const PER_REQUEST = 50;
/** Each property's time limit: generous, as the suite shares the machine; a hang still fails. */
const LIMIT_MS = 300_000;
const TCS = 18;
const UNIT = 'fz-a';

let t: TestApp;
const counts: Record<string, number> = {};
const count = (parser: string, n = 1) => void (counts[parser] = (counts[parser] ?? 0) + n);

beforeAll(async () => {
  t = await createTestApp({ env: { CANSIGHT_RATE_LIMIT_PER_MIN: '10000000', CANSIGHT_RATE_LIMIT_ANON_PER_MIN: '10000000' } });
  expect((await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(UNIT) })).statusCode).toBe(201);
});
afterAll(async () => {
  console.log(`fuzzed inputs per parser: ${Object.entries(counts).map(([k, v]) => `${k} ${v.toLocaleString('en-GB')}`).join(', ')}`);
  await t.close();
});

/** A refusal in the envelope of every error reply. */
function expectEnvelope(status: number, body: string, what: string): void {
  expect(status, `${what}: ${body}`).toBeLessThan(500);
  if (status >= 400) {
    const parsed = JSON.parse(body);
    expect(typeof parsed.error, what).toBe('string');
    expect(typeof parsed.message, what).toBe('string');
    expect(parsed.message.length, what).toBeGreaterThan(0);
  }
}

// A value PostgreSQL's real keeps exactly (rings are stored as float4).
const real = (min: number, max: number) => fc.float({ min: Math.fround(min), max: Math.fround(max), noNaN: true, noDefaultInfinity: true }).map((x) => (Object.is(x, -0) ? 0 : x));

/** A valid ring; its time is given when it is sent (see timed), so no two rings share one. */
const validRing = fc.record({
  ts: fc.constant(TIME_LATER as string),
  loadMw: real(0, 300),
  ambientC: real(-40, 50),
  ambientKPa: real(80, 105),
  speedPct: real(0, 110),
  exhaustC: fc.array(real(100, 700), { minLength: TCS, maxLength: TCS }),
});

/** A ring that must be refused: one field broken in a way the reader has to notice. */
const brokenRing = fc.tuple(validRing, fc.constantFrom('ts', 'loadMw', 'exhaustC', 'speedPct', 'extra', 'ambientKPa'), fc.oneof(fc.string(), fc.integer(), fc.constant(null), fc.constant(1e308), fc.array(fc.integer(), { maxLength: 3 }))).map(([r, field, bad]) => {
  const out: Record<string, unknown> = { ...r };
  // Each broken value is broken in every format (a CSV cell of it cannot read as a number or a time).
  if (field === 'ts') out.ts = `not a time ${String(bad)}`;
  else if (field === 'exhaustC') out.exhaustC = (r.exhaustC as number[]).slice(0, TCS - 1);
  else if (field === 'extra') out.surprise = bad;
  else if (field === 'speedPct') out.speedPct = typeof bad === 'number' && bad > 130 ? bad : 'fast';
  else if (field === 'ambientKPa') out.ambientKPa = -5;
  else out.loadMw = `x${String(bad)}`;
  return out;
});

const record = fc.oneof({ weight: 3, arbitrary: validRing.map((r) => ({ ok: true as const, r })) }, { weight: 2, arbitrary: brokenRing.map((r) => ({ ok: false as const, r })) });
/** A request's worth: at least one valid ring (a body with no usable line is refused whole). */
const requestOf = fc.tuple(validRing, fc.array(record, { minLength: PER_REQUEST - 1, maxLength: PER_REQUEST - 1 })).map(([first, rest]) => [{ ok: true as const, r: first as Record<string, unknown> }, ...rest]);

/** The rings stored at these times, as the reader gives them back. */
async function storedAt(times: string[]): Promise<Map<string, Record<string, unknown>>> {
  const { rows } = await t.db.pool.query(
    `SELECT ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c FROM rings WHERE unit_id = $1 AND ts = ANY($2::timestamptz[])`,
    [UNIT, times],
  );
  // PostgreSQL writes a real as its shortest decimal; read back as a 32-bit float it is the value sent.
  const f = (x: number) => Math.fround(x);
  return new Map(rows.map((r) => [new Date(r.ts).toISOString(), { loadMw: f(r.load_mw), ambientC: f(r.ambient_c), ambientKPa: f(r.ambient_kpa), speedPct: f(r.speed_pct), exhaustC: (r.exhaust_c as number[]).map(f) }]));
}

/** Sends one request of records; checks the tally, what was refused and what was stored. */
async function sendAndCheck(parser: string, generated: Array<{ ok: boolean; r: Record<string, unknown> }>, send: (records: Array<{ ok: boolean; r: Record<string, unknown> }>) => Promise<{ statusCode: number; body: string }>, firstIndex: number): Promise<void> {
  const records = timed(generated);
  const res = await send(records);
  expectEnvelope(res.statusCode, res.body, parser);
  expect(res.statusCode, res.body).toBe(200);
  const tally = JSON.parse(res.body) as { accepted: number; rejectedCount: number; rejected: Array<{ index: number }> };
  const good = records.filter((x) => x.ok);
  expect(tally.accepted, parser).toBe(good.length);
  expect(tally.rejectedCount, parser).toBe(records.length - good.length);
  expect(tally.rejected.map((x: { index: number }) => x.index)).toEqual(records.flatMap((x, i) => (x.ok ? [] : [i + firstIndex])));
  // Every ring given a fresh time, refused or not: only the valid ones may be stored.
  const times = records.map((x) => String(x.r.ts)).filter((ts) => /^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$/.test(ts));
  const stored = await storedAt(times);
  expect(stored.size, parser).toBe(good.length);
  for (const g of good) {
    const s = stored.get(String(g.r.ts));
    expect(s, parser).toEqual({ loadMw: g.r.loadMw, ambientC: g.r.ambientC, ambientKPa: g.r.ambientKPa, speedPct: g.r.speedPct, exhaustC: g.r.exhaustC });
  }
  count(parser, records.length);
}

const requests = Math.ceil(RUNS / PER_REQUEST);

/** Chunk lengths to cut a stream body at (cycled), so line and row ends fall anywhere in a chunk. */
const cuts = fc.array(fc.integer({ min: 1, max: 400 }), { minLength: 1, maxLength: 8 });
function cutInto(text: string, lengths: number[]): Readable {
  const b = Buffer.from(text, 'utf8');
  const parts: Buffer[] = [];
  for (let at = 0, k = 0; at < b.length; k++) {
    const n = lengths[k % lengths.length];
    parts.push(b.subarray(at, at + n));
    at += n;
  }
  return Readable.from(parts);
}

describe('the ring parsers, fuzzed', () => {
  it('JSON ring reader: any bytes are read or handed on without throwing, and a ring it reads is judged as the plain parser judges it', () => {
    const ctx = { nowMs: Date.now(), futureToleranceS: 300, bounds: loadConfig({}).ingest.bounds, thermocoupleCount: thermocoupleCounter([{ effectiveFrom: null, config: { thermocouples: { count: TCS } } }]) };
    const body = fc.oneof(
      fc.uint8Array({ maxLength: 200 }).map((b) => Buffer.from(b)),
      fc.string().map((s) => Buffer.from(`{"rings":[${s}]}`)),
      fc.array(fc.oneof(validRing, brokenRing, fc.jsonValue()), { maxLength: 4 }).map((rings) => Buffer.from(JSON.stringify({ rings }))),
    );
    fc.assert(
      fc.property(body, (buf) => {
        const batch = readRingBatch(buf);
        count('JSON ring reader');
        if (batch === null) return;
        for (let i = 0; i < batch.length; i++) {
          if (batch.fast[i] !== 1) continue;
          batch.reader.load(batch.body, i);
          const fast = batch.reader.check(UNIT, ctx) ? { ...batch.reader.row, exhaustC: Array.from(batch.reader.row.exhaustC) } : null;
          const plain = validateRing(JSON.parse(buf.toString('utf8', batch.starts[i], batch.ends[i])), UNIT, ctx);
          if (isRejection(plain)) expect(fast).toBeNull();
          else expect(fast).toEqual({ ...plain, exhaustC: Array.from(plain.exhaustC) });
        }
        batch.release();
      }),
      { numRuns: RUNS, endOnFailure: true },
    );
  }, LIMIT_MS);

  it(`JSON batches: ${requests * PER_REQUEST} generated rings`, async () => {
    await fc.assert(
      fc.asyncProperty(requestOf, async (records) => {
        await sendAndCheck('JSON batch', records, (sent) => t.app.inject({ method: 'POST', url: `/v1/units/${UNIT}/rings`, headers: bearer(t.keys.ingest), payload: { rings: sent.map((x) => x.r) } }), 0);
      }),
      { numRuns: requests, endOnFailure: true },
    );
  }, LIMIT_MS);

  it(`NDJSON streams: ${requests * PER_REQUEST} generated lines, cut into chunks anywhere`, async () => {
    await fc.assert(
      fc.asyncProperty(requestOf, cuts, async (records, lengths) => {
        await sendAndCheck('NDJSON stream', records, (sent) => {
          const text = sent.map((x) => JSON.stringify({ unitId: UNIT, ...x.r })).join('\n') + '\n';
          return t.app.inject({ method: 'POST', url: '/v1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/x-ndjson' }, payload: cutInto(text, lengths) });
        }, 1);
      }),
      { numRuns: requests, endOnFailure: true },
    );
  }, LIMIT_MS);

  it(`CSV streams: ${requests * PER_REQUEST} generated rows, cut into chunks anywhere`, async () => {
    const header = ['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct', ...Array.from({ length: TCS }, (_, i) => `tc${i + 1}`)].join(',');
    const cell = (v: unknown) => (Array.isArray(v) ? v.join(';') : v === null || v === undefined ? '' : String(v).replace(/[\n\r,"]/g, ' '));
    await fc.assert(
      fc.asyncProperty(requestOf, cuts, async (records, lengths) => {
        // A broken field that CSV cannot carry (an extra field) breaks the row's shape instead.
        await sendAndCheck('CSV stream', records, (sent) => {
          const rows = sent.map((x) => {
            const r = x.r;
            const tcs = Array.isArray(r.exhaustC) ? (r.exhaustC as unknown[]).map(cell) : [cell(r.exhaustC)];
            const extra = 'surprise' in r ? [cell(r.surprise) || 'x'] : [];
            return [cell(r.ts), cell(r.loadMw), cell(r.ambientC), cell(r.ambientKPa), cell(r.speedPct), ...tcs, ...extra].join(',');
          });
          return t.app.inject({ method: 'POST', url: `/v1/units/${UNIT}/rings`, headers: { ...bearer(t.keys.ingest), 'content-type': 'text/csv' }, payload: cutInto([header, ...rows].join('\n') + '\n', lengths) });
        }, 1);
      }),
      { numRuns: requests, endOnFailure: true },
    );
  }, LIMIT_MS);
});

describe('the other parsers, fuzzed', () => {
  const text = fc.oneof(fc.string(), fc.constantFrom('', '-1', '0', '1e9', 'NaN', '2026-01-01T00:00:00Z', 'now', '1h', '1d', '1m', 'true', '%00', '<script>'), fc.integer().map(String), fc.date({ noInvalidDate: true }).map((d) => d.toISOString()));
  const query = fc.dictionary(fc.constantFrom('from', 'to', 'every', 'at', 'state', 'grade', 'minGrade', 'kind', 'cursor', 'limit', 'format', 'unitId', 'days', 'zzz'), text, { maxKeys: 4 });

  it('query parameters of every read route: no 5xx, the envelope on every refusal', async () => {
    const doc = (await t.app.inject({ url: '/openapi.json' })).json() as { paths: Record<string, Record<string, unknown>> };
    const reads = Object.entries(doc.paths).filter(([p, ops]) => p.startsWith('/v1/') && 'get' in ops).map(([p]) => p.replace('{unitId}', UNIT).replace('{chamber}', '3').replace('{thermocouple}', '5').replace(/\{[^}]+\}/g, '00000000-0000-4000-8000-000000000000'));
    expect(reads.length).toBeGreaterThan(10);
    await fc.assert(
      fc.asyncProperty(fc.constantFrom(...reads), query, async (route, q) => {
        const res = await t.app.inject({ url: route, query: q, headers: bearer(t.keys.viewer) });
        expectEnvelope(res.statusCode, res.body, `${route}?${new URLSearchParams(q)}`);
        count('read query');
      }),
      { numRuns: RUNS, endOnFailure: true },
    );
  }, LIMIT_MS);

  it('unit configuration: no 5xx, the envelope on every refusal, and a unit taken reads back as sent', async () => {
    let n = 0;
    const mutate = fc.tuple(fc.constantFrom('name', 'ratedPowerMw', 'thermocouples', 'chambers', 'swirl', 'temperatureUnit', 'extra', 'id', 'none'), fc.jsonValue()).map(([field, v]) => {
      const body: Record<string, unknown> = unitBody(`fz-u${n++}`);
      if (field === 'extra') body.surprise = v;
      else if (field !== 'none') body[field] = v;
      return body;
    });
    await fc.assert(
      fc.asyncProperty(fc.oneof({ weight: 4, arbitrary: mutate }, { weight: 1, arbitrary: fc.jsonValue() }), async (body) => {
        const res = await t.app.inject({ method: 'POST', url: '/v1/units', headers: { ...bearer(t.keys.admin), 'content-type': 'application/json' }, payload: JSON.stringify(body) });
        expectEnvelope(res.statusCode, res.body, 'unit configuration');
        if (res.statusCode === 201) {
          const b = body as Record<string, unknown>;
          const back = (await t.app.inject({ url: `/v1/units/${String(b.id)}`, headers: bearer(t.keys.viewer) })).json();
          expect(back).toMatchObject({ id: b.id, name: b.name, site: b.site, ratedPowerMw: b.ratedPowerMw });
        }
        count('unit configuration');
      }),
      { numRuns: RUNS, endOnFailure: true },
    );
  }, LIMIT_MS);

  it('webhook bodies: no 5xx and the envelope on every refusal', async () => {
    // Hosts are address literals or .invalid names, so no lookup waits on a resolver.
    const url = fc.oneof(
      fc.string(),
      fc.tuple(fc.constantFrom('http', 'https', 'ftp', 'javascript', 'file'), fc.oneof(fc.ipV4(), fc.ipV6().map((a) => `[${a}]`), fc.constantFrom('receiver.invalid', 'localhost', '')), fc.webPath()).map(([s, h, p]) => `${s}://${h}${p}`),
    );
    const body = fc.oneof(
      fc.record({ url, minGrade: fc.oneof(fc.constantFrom('notice', 'warning', 'alarm', 'critical'), fc.string()), secret: fc.oneof(fc.string(), fc.constant('fuzz-secret-0123456789')) }, { requiredKeys: [] }),
      fc.jsonValue(),
    );
    await fc.assert(
      fc.asyncProperty(body, async (b) => {
        const res = await t.app.inject({ method: 'POST', url: '/v1/webhooks', headers: { ...bearer(t.keys.admin), 'content-type': 'application/json' }, payload: JSON.stringify(b) });
        expectEnvelope(res.statusCode, res.body, 'webhook body');
        if (res.statusCode === 201) expect(res.json().url).toBeTruthy();
        count('webhook body');
      }),
      { numRuns: RUNS, endOnFailure: true },
    );
  }, LIMIT_MS);
});
