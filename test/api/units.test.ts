import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS } from '../helpers/transport.ts';

describe.each(TRANSPORTS)('over %s', (transport) => {
  let t: TestApp;
  beforeAll(async () => {
    t = await createTestApp({ transport });
  });
  afterAll(async () => t.close());

  const post = (body: unknown, key = t.keys.admin) => t.send({ method: 'POST', url: '/v1/units', headers: bearer(key), payload: body as object });

  describe('units API', () => {
    it('registers a unit and returns it with version 1 in force from the beginning', async () => {
      const res = await post(unitBody('ridge-2'));
      expect(res.statusCode).toBe(201);
      const u = res.json();
      expect(u).toMatchObject({ id: 'ridge-2', ratedPowerMw: 24, thermocouples: { count: 18, firstAngleDeg: 10 }, version: 1 });
      expect(u.versions).toEqual([expect.objectContaining({ version: 1, effectiveFrom: null })]);
      const got = await t.send({ url: '/v1/units/ridge-2', headers: bearer(t.keys.viewer) });
      expect(got.statusCode).toBe(200);
      expect(got.json().swirl.curve).toEqual([[0.3, 92], [0.6, 74], [1, 55]]);
    });

    it('refuses a duplicate id with 409', async () => {
      await post(unitBody('dup-1'));
      const res = await post(unitBody('dup-1'));
      expect(res.statusCode).toBe(409);
      expect(res.json()).toMatchObject({ error: 'conflict' });
      expect(res.json().message).toContain('dup-1');
    });

    // The fifth entry, where given, is what the message must say: enums list what is allowed.
    const invalid: Array<[string, Record<string, unknown>, number, string, RegExp?]> = [
      ['an unknown field', { colour: 'red' }, 400, 'colour'],
      ['an id with capitals', { id: 'Ridge' }, 400, 'id'],
      ['a missing rated power', { ratedPowerMw: undefined }, 400, 'ratedPowerMw'],
      ['zero rated power', { ratedPowerMw: 0 }, 400, 'ratedPowerMw'],
      ['too few thermocouples', { thermocouples: { count: 2, firstAngleDeg: 0 } }, 400, 'thermocouples.count'],
      ['a thermocouple angle of 360', { thermocouples: { count: 18, firstAngleDeg: 360 } }, 400, 'thermocouples.firstAngleDeg'],
      ['a negative chamber angle', { chambers: { count: 10, firstAngleDeg: -5 } }, 400, 'chambers.firstAngleDeg'],
      ['a fractional chamber count', { chambers: { count: 9.5, firstAngleDeg: 0 } }, 400, 'chambers.count'],
      ['a swirl sense of 2', { swirl: { sense: 2, curve: [[0.5, 40]] } }, 400, 'swirl.sense', /^Body field "swirl\.sense": must be one of 1, -1\.$/],
      ['a swirl load above 1.2', { swirl: { sense: 1, curve: [[0.5, 40], [1.3, 30]] } }, 400, 'swirl.curve'],
      ['an empty swirl curve', { swirl: { sense: 1, curve: [] } }, 400, 'swirl.curve'],
      ['a temperature unit of K', { temperatureUnit: 'K' }, 400, 'temperatureUnit', /^Body field "temperatureUnit": must be one of "C", "F"\.$/],
      ['angles that do not match the count', { thermocouples: { count: 4, anglesDeg: [0, 90, 180] } }, 422, 'thermocouples.anglesDeg'],
      ['a repeated thermocouple angle', { thermocouples: { count: 3, anglesDeg: [0, 90, 90] } }, 422, 'thermocouples.anglesDeg.2'],
      // Neighbours go by number: 90° after 180° would make thermocouples 2 and 3 neighbours across the ring.
      ['thermocouple angles out of ring order', { thermocouples: { count: 4, anglesDeg: [0, 180, 90, 270] } }, 422, 'thermocouples.anglesDeg.2', /thermocouples\.anglesDeg\.2 90° comes after 180°: the angles must increase round the ring/],
      ['a thermocouple angle list that goes round twice', { thermocouples: { count: 5, anglesDeg: [300, 350, 10, 200, 100] } }, 422, 'thermocouples.anglesDeg.4'],
      ['a swirl curve out of load order', { swirl: { sense: 1, curve: [[0.6, 70], [0.3, 90]] } }, 422, 'swirl.curve.1'],
      ['both first angle and angle list', { thermocouples: { count: 3, firstAngleDeg: 0, anglesDeg: [0, 120, 240] } }, 422, 'thermocouples'],
    ];
    for (const [what, change, status, field, says] of invalid) {
      it(`refuses ${what} with ${status}, naming ${field}`, async () => {
        const body: Record<string, unknown> = { ...unitBody('bad-unit'), ...change };
        for (const k of Object.keys(body)) if (body[k] === undefined) delete body[k];
        const res = await post(body);
        expect(res.statusCode).toBe(status);
        const err = res.json();
        expect(err.error).toBe(status === 400 ? 'bad_request' : 'invalid');
        expect(JSON.stringify(err.details)).toContain(field);
        expect(err.message.length).toBeGreaterThan(10);
        if (says) expect(err.message).toMatch(says);
      });
    }

    it('answers an empty POST with "a JSON body is required", with or without a content type', async () => {
      for (const headers of [bearer(t.keys.admin), { ...bearer(t.keys.admin), 'content-type': 'application/json' }]) {
        const res = await t.send({ method: 'POST', url: '/v1/units', headers });
        expect(res.statusCode).toBe(400);
        expect(res.json()).toMatchObject({ error: 'bad_request', details: [{ field: 'body', reason: 'required: a JSON object' }] });
        expect(res.json().message).toMatch(/^A JSON body is required/);
      }
    });

    it('accepts one-point swirl curves and explicit angle lists', async () => {
      const res = await post(unitBody('explicit-1', { thermocouples: { count: 4, anglesDeg: [5, 95, 185, 275] }, swirl: { sense: -1, curve: [[1.0, 40]] } }));
      expect(res.statusCode).toBe(201);
      // A list that starts before 360° and carries on past it is in ring order.
      const past = await post(unitBody('explicit-2', { thermocouples: { count: 4, anglesDeg: [275, 5, 95, 185] }, swirl: { sense: -1, curve: [[1.0, 40]] } }));
      expect(past.statusCode).toBe(201);
    });

    it('versions a geometry change with the time it takes effect, and renames in place', async () => {
      await post(unitBody('moor-1'));
      const res = await t.send({
        method: 'PATCH', url: '/v1/units/moor-1', headers: bearer(t.keys.admin),
        payload: { name: 'Moor unit 1', swirl: { sense: 1, curve: [[0.5, 60], [1.0, 50]] }, effectiveFrom: '2026-01-01T00:00:00Z' },
      });
      expect(res.statusCode).toBe(200);
      const u = res.json();
      expect(u.name).toBe('Moor unit 1');
      expect(u.version).toBe(2);
      expect(u.swirl.curve).toEqual([[0.5, 60], [1, 50]]);
      expect(u.thermocouples).toEqual({ count: 18, firstAngleDeg: 10 });
      expect(u.versions.map((v: { version: number }) => v.version)).toEqual([1, 2]);
      // A change that takes effect later is recorded but not yet in force.
      const later = await t.send({ method: 'PATCH', url: '/v1/units/moor-1', headers: bearer(t.keys.admin), payload: { ratedPowerMw: 30, effectiveFrom: '2099-01-01T00:00:00Z' } });
      expect(later.json()).toMatchObject({ version: 2, ratedPowerMw: 24 });
      expect(later.json().versions).toHaveLength(3);
      const same = await t.send({ method: 'PATCH', url: '/v1/units/moor-1', headers: bearer(t.keys.admin), payload: { ratedPowerMw: 31, effectiveFrom: '2099-01-01T00:00:00Z' } });
      expect(same.statusCode).toBe(409);
      const bad = await t.send({ method: 'PATCH', url: '/v1/units/moor-1', headers: bearer(t.keys.admin), payload: { swirl: { sense: 1, curve: [[0.9, 1], [0.2, 2]] } } });
      expect(bad.statusCode).toBe(422);
      const empty = await t.send({ method: 'PATCH', url: '/v1/units/moor-1', headers: bearer(t.keys.admin), payload: {} });
      expect(empty.statusCode).toBe(400);
    });

    it('answers 404 for an unknown unit on GET and PATCH, in the error envelope', async () => {
      for (const method of ['GET', 'PATCH'] as const) {
        const res = await t.send({ method, url: '/v1/units/nowhere-9', headers: bearer(t.keys.admin), ...(method === 'PATCH' ? { payload: { name: 'x' } } : {}) });
        expect(res.statusCode).toBe(404);
        expect(res.json()).toMatchObject({ error: 'not_found', message: expect.stringContaining('nowhere-9') });
      }
    });

    it('lists only the units in a scoped key\'s scope', async () => {
      await post(unitBody('scope-a'));
      await post(unitBody('scope-b'));
      const key = await t.key('viewer', ['scope-a']);
      const res = await t.send({ url: '/v1/units', headers: bearer(key) });
      expect(res.json().units.map((u: { id: string }) => u.id)).toEqual(['scope-a']);
    });

    it('answers malformed JSON with 400 and a wrong content type with 415', async () => {
      const bad = await t.send({ method: 'POST', url: '/v1/units', headers: { ...bearer(t.keys.admin), 'content-type': 'application/json' }, payload: '{"id": ' });
      expect(bad.statusCode).toBe(400);
      expect(bad.json().error).toBe('bad_request');
      const wrong = await t.send({ method: 'POST', url: '/v1/units', headers: { ...bearer(t.keys.admin), 'content-type': 'application/xml' }, payload: '<unit/>' });
      expect(wrong.statusCode).toBe(415);
      expect(wrong.json()).toMatchObject({ error: 'unsupported_media_type', message: 'Content-Type application/xml is not taken here; send application/json.' });
    });

    it('serves an OpenAPI document generated from the route schemas', async () => {
      const res = await t.send({ url: '/openapi.json' });
      expect(res.statusCode).toBe(200);
      const doc = res.json();
      expect(doc.openapi).toMatch(/^3\./);
      expect(Object.keys(doc.paths)).toEqual(expect.arrayContaining(['/v1/units', '/v1/units/{unitId}', '/health', '/ready']));
    });

    it('reports ready when the database answers and migrations are current', async () => {
      const res = await t.send({ url: '/ready' });
      expect(res.statusCode).toBe(200);
      expect(res.json()).toEqual({ ready: true, database: true, migrations: true });
    });
  });
});
