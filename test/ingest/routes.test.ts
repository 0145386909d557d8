/**
 * The ring endpoints over HTTP on a real database: replies, counts, what is stored, every
 * whole-request status, unit scope, NOTIFY, and a stream cut off mid-way over a real socket.
 * Every case runs through inject and over a loopback socket (test/helpers/transport.ts).
 */
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS, openPost } from '../helpers/transport.ts';
import { NEW_RINGS_CHANNEL, readRings } from '../../services/db/rings.ts';
import { BASE_MS, TC, count, csv, ndjson, postBatch, postCsv, postNdjson, registerUnit, ring, tsAt } from './fixtures.ts';

describe.each(TRANSPORTS)('over %s', (transport) => {
  let t: TestApp;
  beforeAll(async () => {
    t = await createTestApp({
      transport,
      env: { CANSIGHT_MAX_BATCH_RINGS: '50', CANSIGHT_BODY_LIMIT_BYTES: '65536', CANSIGHT_LINE_LIMIT_BYTES: '4096', CANSIGHT_INGEST_CHUNK_RINGS: '7' },
    });
    for (const id of ['u1', 'u2', 'u3', 'u4', 'u5', 'u6', 'u7', 'cut-1']) await registerUnit(t, id);
  });
  afterAll(async () => t?.close());

  describe('JSON batch', () => {
    it('stores every valid ring and a re-send counts as duplicates, storing nothing twice', async () => {
      const rings = Array.from({ length: 20 }, (_, i) => ring(i));
      const first = await postBatch(t, 'u1', rings);
      expect(first.statusCode).toBe(200);
      expect(first.json()).toEqual({ accepted: 20, duplicates: 0, rejected: [], rejectedCount: 0 });
      const again = await postBatch(t, 'u1', rings);
      expect(again.json()).toEqual({ accepted: 0, duplicates: 20, rejected: [], rejectedCount: 0 });
      const overlap = await postBatch(t, 'u1', Array.from({ length: 10 }, (_, i) => ring(15 + i)));
      expect(overlap.json()).toMatchObject({ accepted: 5, duplicates: 5 });
      expect(await count(t, 'u1')).toBe(25);
    });

    it('stores the good rings of a mixed batch and reports the bad ones by index from 0', async () => {
      const rings = [ring(0), { ...ring(1), exhaustC: [550] }, ring(2), { ...ring(3), ts: 'not a time' }, ring(4), { ...ring(5), loadMw: 'high' }];
      const res = await postBatch(t, 'u2', rings);
      expect(res.statusCode).toBe(200);
      const body = res.json();
      expect(body.accepted).toBe(3);
      expect(body.rejectedCount).toBe(3);
      expect(body.rejected).toEqual([
        { index: 1, field: 'exhaustC', reason: expect.stringMatching(/has 1 readings, but unit u2 has 18 thermocouples/) },
        { index: 3, field: 'ts', reason: expect.stringMatching(/RFC 3339/) },
        { index: 5, field: 'loadMw', reason: expect.stringMatching(/not a number/) },
      ]);
      const stored = await readRings(t.db.pool, 'u2', BASE_MS, BASE_MS + 3_600_000, 100);
      expect(stored.map((r) => r.tsMs)).toEqual([0, 2, 4].map((i) => BASE_MS + i * 1000));
    });

    it('stores readings in °C in thermocouple order with missing ones as NaN, read back in time order', async () => {
      const r0 = ring(100, { exhaustF: Array.from({ length: TC }, (_, k) => (k === 2 ? null : 1022 + k * 1.8)), exhaustC: undefined, cdtC: 390, flameDetected: true });
      const res = await postBatch(t, 'u3', [ring(102), r0, ring(101)]);
      expect(res.json().accepted).toBe(3);
      const [a, b, c] = await readRings(t.db.pool, 'u3', tsAt(0), tsAt(1000), 10);
      expect([a.tsMs, b.tsMs, c.tsMs]).toEqual([100, 101, 102].map((i) => BASE_MS + i * 1000));
      expect(a.exhaustC).toBeInstanceOf(Float64Array);
      expect(a.exhaustC[0]).toBeCloseTo(550, 3);
      expect(a.exhaustC[1]).toBeCloseTo(551, 3);
      expect(a.exhaustC[2]).toBeNaN();
      expect([a.cdtC, a.flameDetected, a.cdpKPa]).toEqual([390, true, null]);
      expect(Array.from(c.exhaustC)).toEqual((ring(102).exhaustC as number[]).map((v) => Math.fround(v)));
    });

    it('a ring in a less common form is judged on its own: same rings stored, same indices reported', async () => {
      const f = (r: Record<string, unknown>) => ({ ...r, exhaustC: null, exhaustF: (r.exhaustC as number[]).map((c) => (c * 9) / 5 + 32) });
      const parts = [
        JSON.stringify(ring(5000)),
        JSON.stringify(ring(5001)).replace(/Z"/, '\\u005a"'), // an escape in the time
        JSON.stringify(f(ring(5002))),
        JSON.stringify({ unitId: 'u2', ...ring(5003) }),
        JSON.stringify(ring(5004)).replace('}', ',"loadMw":"high"}'), // a key twice: the last one counts
        JSON.stringify(ring(5000)),
      ];
      const res = await t.send({ method: 'POST', url: '/v1/units/u7/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/json' }, payload: `{"rings":[${parts.join(',')}]}` });
      expect(res.json()).toMatchObject({ accepted: 3, duplicates: 1, rejectedCount: 2 });
      expect(res.json().rejected.map((r: { index: number; field: string }) => [r.index, r.field])).toEqual([[3, 'unitId'], [4, 'loadMw']]);
      const stored = await readRings(t.db.pool, 'u7', tsAt(5000), tsAt(5010), 10);
      expect(stored.map((r) => (r.tsMs - BASE_MS) / 1000)).toEqual([5000, 5001, 5002]);
      for (const r of stored) {
        const sent = ring((r.tsMs - BASE_MS) / 1000).exhaustC as number[];
        sent.forEach((c, k) => expect(r.exhaustC[k]).toBeCloseTo(c, 3));
      }
    });

    it('counts a ring sent twice in one batch once, and the second as a duplicate', async () => {
      const res = await postBatch(t, 'u4', [ring(1), ring(2), ring(1)]);
      expect(res.json()).toMatchObject({ accepted: 2, duplicates: 1 });
    });

    it('takes historic and out-of-order rings, making the month partition on demand', async () => {
      const old = Date.UTC(2017, 4, 20);
      const res = await postBatch(t, 'u4', [ring(5, {}, old), ring(1, {}, old), ring(0, {}, Date.UTC(2016, 10, 3))]);
      expect(res.json()).toMatchObject({ accepted: 3, duplicates: 0 });
      const parts = await t.db.pool.query(`SELECT c.relname FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid WHERE i.inhparent = 'rings'::regclass AND c.relname IN ('rings_2017_05', 'rings_2016_11')`);
      expect(parts.rows.map((r) => r.relname).sort()).toEqual(['rings_2016_11', 'rings_2017_05']);
      expect(await count(t, 'u4')).toBe(5);
    });

    it('tells the worker channel the units written, only after commit', async () => {
      const listener = new pg.Client({ connectionString: t.db.url });
      await listener.connect();
      const got: string[] = [];
      listener.on('notification', (n) => n.channel === NEW_RINGS_CHANNEL && got.push(n.payload ?? ''));
      await listener.query(`LISTEN ${NEW_RINGS_CHANNEL}`);
      await postBatch(t, 'u5', [ring(0), ring(1)]);
      await postBatch(t, 'u5', [ring(0), ring(1)]); // only duplicates: nothing new, no notice
      await postNdjson(t, ndjson([{ unitId: 'u6', ...ring(0) }, { unitId: 'u5', ...ring(9) }]));
      await listener.query('SELECT 1'); // notifications sent before this round trip have arrived
      await listener.end();
      expect(got).toEqual(['["u5"]', '["u5","u6"]']);
    });
  });

  describe('whole-request answers', () => {
    it('400 for a body that is not JSON, has no rings list, or has other fields', async () => {
      const notJson = await t.send({ method: 'POST', url: '/v1/units/u1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/json' }, payload: '{"rings": [' });
      expect(notJson.statusCode).toBe(400);
      expect(notJson.json().error).toBe('bad_request');
      const noList = await t.send({ method: 'POST', url: '/v1/units/u1/rings', headers: bearer(t.keys.ingest), payload: { ring: [] } });
      expect(noList.statusCode).toBe(400);
      expect(noList.json().message).toMatch(/unknown field "ring"/);
      const notList = await t.send({ method: 'POST', url: '/v1/units/u1/rings', headers: bearer(t.keys.ingest), payload: { rings: {} } });
      expect(notList.statusCode).toBe(400);
      expect(notList.json().message).toMatch(/"rings": a list/);
      const badId = await postBatch(t, 'Not_A_Unit', [ring(0)]);
      expect(badId.statusCode).toBe(400);
      for (const payload of ['{"rings":[{"__proto__":{"x":1}}]}', '{"rings":[],"__proto__":{"x":1}}', '{"rings":[{"constructor":{"prototype":{"x":1}}}]}', '']) {
        const res = await t.send({ method: 'POST', url: '/v1/units/u1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/json' }, payload });
        expect(res.statusCode, payload).toBe(400);
      }
    });

    it('401 without a key, 403 for a role that may not ingest, and 200 for admin', async () => {
      const none = await t.send({ method: 'POST', url: '/v1/units/u1/rings', payload: { rings: [] } });
      expect(none.statusCode).toBe(401);
      expect((await postBatch(t, 'u1', [ring(900)], t.keys.viewer)).statusCode).toBe(403);
      expect((await postBatch(t, 'u1', [ring(900)], t.keys.admin)).statusCode).toBe(200);
    });

    it('403 on the JSON route for a unit outside the key\'s scope; nothing stored', async () => {
      const scoped = await t.key('ingest', ['u1']);
      const res = await postBatch(t, 'u2', [ring(500)], scoped);
      expect(res.statusCode).toBe(403);
      expect(res.json().message).toMatch(/limited to units u1/);
      expect((await postCsv(t, 'u2', csv([ring(500)]), scoped)).statusCode).toBe(403);
      expect((await postBatch(t, 'u1', [ring(500)], scoped)).statusCode).toBe(200);
      expect((await readRings(t.db.pool, 'u2', tsAt(500), tsAt(501), 10)).length).toBe(0);
    });

    it('404 for a unit that is not registered', async () => {
      const res = await postBatch(t, 'nowhere-9', [ring(0)]);
      expect(res.statusCode).toBe(404);
      expect(res.json()).toMatchObject({ error: 'not_found', message: expect.stringMatching(/nowhere-9/) });
      expect((await postCsv(t, 'nowhere-9', csv([ring(0)]))).statusCode).toBe(404);
    });

    it('413 over the body limit, over the batch size, and for a line over the line limit; nothing stored', async () => {
      const big = await t.send({ method: 'POST', url: '/v1/units/u6/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/json' }, payload: JSON.stringify({ rings: [ring(0)], pad: 'x'.repeat(70_000) }) });
      expect(big.statusCode).toBe(413);
      // The limit and the way out: smaller batches, or a stream read line by line.
      expect(big.json().message).toMatch(/larger than 65536 bytes .*CANSIGHT_BODY_LIMIT_BYTES.*nothing was stored.*smaller batches.*NDJSON \(application\/x-ndjson.*CSV \(text\/csv\)/);
      const many = await postBatch(t, 'u6', Array.from({ length: 51 }, (_, i) => ring(1000 + i)));
      expect(many.statusCode).toBe(413);
      expect(many.json().message).toMatch(/51 rings; at most 50 .*smaller batches, or stream the rings as NDJSON/);
      const longLine = ndjson([{ unitId: 'u6', ...ring(2000) }]) + JSON.stringify({ unitId: 'u6', ...ring(2001), pad: 'x'.repeat(5000) }) + '\n';
      const line = await postNdjson(t, longLine);
      expect(line.statusCode).toBe(413);
      expect(line.json().message).toMatch(/Line 2 is longer than 4096 bytes.*CANSIGHT_LINE_LIMIT_BYTES.*one ring on each line/);
      expect((await readRings(t.db.pool, 'u6', tsAt(1000), tsAt(3000), 10)).length).toBe(0);
    });

    it('415 for a content type the endpoint does not take', async () => {
      const plain = await t.send({ method: 'POST', url: '/v1/units/u1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'text/plain' }, payload: 'hello' });
      expect(plain.statusCode).toBe(415);
      expect(plain.json().message).toMatch(/application\/json, text\/csv or application\/x-ndjson/);
      const xml = await t.send({ method: 'POST', url: '/v1/units/u1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/xml' }, payload: '<rings/>' });
      expect(xml.statusCode).toBe(415);
      const jsonToStream = await t.send({ method: 'POST', url: '/v1/rings', headers: bearer(t.keys.ingest), payload: { rings: [] } });
      expect(jsonToStream.statusCode).toBe(415);
      expect(jsonToStream.json().message).toMatch(/application\/x-ndjson/);
    });

    it('422 when rings were sent and not one could be stored, with every rejection in details', async () => {
      const res = await postBatch(t, 'u6', [{ ...ring(0), exhaustC: [1, 2] }, { ...ring(1), speedPct: 400 }]);
      expect(res.statusCode).toBe(422);
      const body = res.json();
      expect(body.error).toBe('invalid');
      expect(body.message).toMatch(/None of the 2 rings could be stored; the first problem: index 0, exhaustC has 2 readings/);
      expect(body.details).toEqual([
        { index: 0, field: 'exhaustC', reason: expect.any(String) },
        { index: 1, field: 'speedPct', reason: expect.stringMatching(/outside the physical bounds/) },
      ]);
    });

    it('an empty batch is a 200 with nothing to do', async () => {
      expect((await postBatch(t, 'u6', [])).json()).toEqual({ accepted: 0, duplicates: 0, rejected: [], rejectedCount: 0 });
    });
  });

  describe('NDJSON stream', () => {
    it('stores the lines of many units and rejects bad lines by line number from 1', async () => {
      const scoped = await t.key('ingest', ['u1', 'u2', 'u3']);
      const body = [
        JSON.stringify({ unitId: 'u1', ...ring(3000) }),
        '{"unitId": "u2", "ts": ',
        JSON.stringify(ring(3001)),
        '',
        JSON.stringify({ unitId: 'ghost-1', ...ring(3002) }),
        JSON.stringify({ unitId: 'u4', ...ring(3003) }),
        JSON.stringify({ unitId: 'u2', ...ring(3004), ambientKPa: 5 }),
        JSON.stringify({ unitId: 'u2', ...ring(3005) }),
        '[1,2]',
        JSON.stringify({ unitId: 'u3', ...ring(3006) }),
      ].join('\r\n');
      const res = await postNdjson(t, body, scoped);
      expect(res.statusCode).toBe(200);
      const r = res.json();
      expect(r.accepted).toBe(3);
      expect(r.rejected).toEqual([
        { index: 2, field: 'line', reason: expect.stringMatching(/^is not JSON/) },
        { index: 3, field: 'unitId', reason: 'is required on every line' },
        { index: 5, field: 'unitId', reason: 'this key may not write unit ghost-1' }, // scope first: a limited key learns nothing of other units
        { index: 6, field: 'unitId', reason: 'this key may not write unit u4' },
        { index: 7, field: 'ambientKPa', reason: expect.stringMatching(/5 kPa is outside/) },
        { index: 9, field: 'line', reason: 'is not a JSON object' },
      ]);
      expect(await count(t, 'u4')).toBe(5);
      const unknown = await postNdjson(t, ndjson([{ unitId: 'ghost-1', ...ring(3010) }, { unitId: 'u1', ...ring(3010) }]));
      expect(unknown.json()).toMatchObject({ accepted: 1, rejected: [{ index: 1, field: 'unitId', reason: 'no unit ghost-1 is registered' }] });
    });

    it('on the unit\'s own URL, lines may leave out unitId', async () => {
      const res = await postNdjson(t, ndjson([ring(3100), ring(3101)]), t.keys.ingest, '/v1/units/u3/rings');
      expect(res.json()).toMatchObject({ accepted: 2 });
    });

    it('400 when no line of the body is JSON', async () => {
      const res = await postNdjson(t, 'rings:\n  - ts: now\n');
      expect(res.statusCode).toBe(400);
      expect(res.json().message).toMatch(/No line of the body is JSON/);
    });

    it('a unit first named after a chunk that met stored rings is looked up once that chunk is written; exact counts', async () => {
      await postBatch(t, 'u7', Array.from({ length: 10 }, (_, i) => ring(6000 + i)));
      // Chunks of 7: the first two meet stored rings (the slow way) while the next lines are read;
      // u1 first appears after them, and its configuration is read on the same connection.
      const lines = [
        ...Array.from({ length: 16 }, (_, i) => ({ unitId: 'u7', ...ring(6000 + i) })),
        ...Array.from({ length: 5 }, (_, i) => ({ unitId: 'u1', ...ring(6100 + i) })),
      ];
      const res = await postNdjson(t, ndjson(lines));
      expect(res.json()).toMatchObject({ accepted: 11, duplicates: 10, rejectedCount: 0 });
      expect(await readRings(t.db.pool, 'u7', tsAt(6000), tsAt(6100), 100)).toHaveLength(16);
    });

    it('a re-sent stream counts every ring as a duplicate', async () => {
      const body = ndjson(Array.from({ length: 30 }, (_, i) => ({ unitId: i % 2 ? 'u5' : 'u6', ...ring(4000 + i) })));
      expect((await postNdjson(t, body)).json()).toMatchObject({ accepted: 30, duplicates: 0 });
      expect((await postNdjson(t, body)).json()).toMatchObject({ accepted: 0, duplicates: 30 });
    });
  });

  describe('CSV', () => {
    it('stores rows and reports bad ones by data row from 1, naming the CSV column', async () => {
      const rows = [ring(5000), ring(5001), { ...ring(5002), loadMw: 'abc' }, ring(5003)];
      const text = csv(rows).replace(/\n([^\n]*)\n$/, '\n$1,99\n'); // last row: one field too many
      const withBadTc = text.replace(/^(2026[^\n]*5001[^\n]*?,)550\.25/m, '$1-999');
      const res = await postCsv(t, 'u1', withBadTc);
      expect(res.statusCode).toBe(200);
      expect(res.json().accepted).toBeGreaterThanOrEqual(1);
      const rej = res.json().rejected as { index: number; field: string }[];
      expect(rej.find((x) => x.index === 3)).toMatchObject({ field: 'load_mw' });
      expect(rej.find((x) => x.index === 4)).toMatchObject({ field: 'row', reason: `has ${6 + TC} fields; the header has ${5 + TC}` });
    });

    it('takes °F columns (tcN_f), optional columns and empty cells as missing readings', async () => {
      const head = ['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct', 'cdt_c', 'flame_detected', ...Array.from({ length: TC }, (_, k) => `tc${k + 1}_f`)].join(',');
      const line = [tsAt(6000), 21, 12, 101, 100, 390, 'true', '', ...Array.from({ length: TC - 1 }, () => 1022)].join(',');
      const res = await postCsv(t, 'u2', `${head}\n${line}\n`);
      expect(res.json()).toMatchObject({ accepted: 1 });
      const [r] = await readRings(t.db.pool, 'u2', tsAt(6000), tsAt(6001), 1);
      expect(r.exhaustC[0]).toBeNaN();
      expect(r.exhaustC[1]).toBeCloseTo(550, 3);
      expect([r.cdtC, r.flameDetected]).toEqual([390, true]);
    });

    it('422 for a header that is not usable, naming each problem', async () => {
      const res = await postCsv(t, 'u1', 'ts,load_mw,ambient_c,speed_pct,tc1,tc3,colour\n');
      expect(res.statusCode).toBe(422);
      const fields = (res.json().details as { field: string }[]).map((d) => d.field);
      expect(fields).toEqual(expect.arrayContaining(['colour', 'ambient_kpa', 'tc2']));
    });
  });

  describe('a stream cut off mid-way', () => {
    it('leaves nothing stored when the client breaks the connection before the end', async () => {
      const req = await openPost(t.app, '/v1/rings', { ...bearer(t.keys.ingest), 'content-type': 'application/x-ndjson' });
      // 60 rings: several chunks (of 7) are already copied into the open transaction (a session
      // with a transaction open, idle between chunks or busy copying one).
      req.write(ndjson(Array.from({ length: 60 }, (_, i) => ({ unitId: 'cut-1', ...ring(i) }))));
      const inTransaction = async () => {
        const { rows } = await t.db.pool.query(`SELECT count(*)::int AS n FROM pg_stat_activity WHERE datname = current_database() AND pid <> pg_backend_pid() AND backend_type = 'client backend' AND xact_start IS NOT NULL`);
        return rows[0].n as number;
      };
      for (let i = 0; i < 1200 && (await inTransaction()) === 0; i++) await new Promise((r) => setTimeout(r, 25));
      expect(await inTransaction()).toBeGreaterThan(0);
      req.destroy();
      for (let i = 0; i < 1200 && (await inTransaction()) > 0; i++) await new Promise((r) => setTimeout(r, 25));
      expect(await inTransaction()).toBe(0);
      expect(await count(t, 'cut-1')).toBe(0);
      // The same rings sent whole afterwards are all new.
      const whole = await postNdjson(t, ndjson(Array.from({ length: 60 }, (_, i) => ({ unitId: 'cut-1', ...ring(i) }))));
      expect(whole.json()).toMatchObject({ accepted: 60, duplicates: 0 });
    });
  });
});
