/**
 * A key limited to some units stays inside them: a unit-scoped admin cannot register a unit
 * outside its scope, and an alert of a unit it may not see is answered as if it did not exist.
 * (OWASP API Security Top 10 2023, API1 broken object-level authorisation and API5 broken
 * function-level authorisation.)
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS } from '../helpers/transport.ts';
import { AUTH_ALERT_ID, seedAuthFixtures } from '../helpers/alerts.ts';

describe.each(TRANSPORTS)('unit scope over %s', (transport) => {
  let t: TestApp;
  beforeAll(async () => {
    t = await createTestApp({ transport });
    for (const id of ['auth-a', 'auth-b']) expect((await t.send({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id) })).statusCode).toBe(201);
    await seedAuthFixtures(t.db.pool);
  });
  afterAll(async () => t.close());

  it('refuses a unit-scoped admin registering a unit outside its scope, and takes one inside it', async () => {
    const scoped = await t.key('admin', ['scope-in']);
    const outside = await t.send({ method: 'POST', url: '/v1/units', headers: bearer(scoped), payload: unitBody('scope-out') });
    expect(outside.statusCode).toBe(403);
    expect(outside.json()).toMatchObject({ error: 'forbidden', message: expect.stringContaining('may not register unit scope-out') });
    expect((await t.send({ url: '/v1/units/scope-out', headers: bearer(t.keys.admin) })).statusCode).toBe(404);
    expect((await t.send({ method: 'POST', url: '/v1/units', headers: bearer(scoped), payload: unitBody('scope-in') })).statusCode).toBe(201);
  });

  it("answers 404 for another unit's alert, exactly as for an alert that does not exist", async () => {
    const other = await t.key('operator', ['auth-b']);
    const seen = await t.send({ url: `/v1/alerts/${AUTH_ALERT_ID}`, headers: bearer(other) });
    const unknown = await t.send({ url: '/v1/alerts/00000000-0000-4000-8000-000000000000', headers: bearer(other) });
    expect(seen.statusCode).toBe(404);
    expect(unknown.statusCode).toBe(404);
    expect(seen.json().message.replace(AUTH_ALERT_ID, 'ID')).toBe(unknown.json().message.replace('00000000-0000-4000-8000-000000000000', 'ID'));
    const ack = await t.send({ method: 'POST', url: `/v1/alerts/${AUTH_ALERT_ID}/ack`, headers: bearer(other), payload: { by: 'shift operator 1' } });
    expect(ack.statusCode).toBe(404);
    expect(ack.body).not.toContain('auth-a');
  });
});
