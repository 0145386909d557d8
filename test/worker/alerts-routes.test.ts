/**
 * The alert and webhook routes: list filters, cursor pagination, unit scope, actions and their
 * validation errors, roles.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { TRANSPORTS } from '../helpers/transport.ts';
import { seedAlert } from '../helpers/alerts.ts';
import type { AlertRow } from '../../services/db/alert-rows.ts';

describe.each(TRANSPORTS)('over %s', (transport) => {
  let t: TestApp;
  const seeded: AlertRow[] = [];
  const base = Date.parse('2026-02-01T00:00:00Z');

  beforeAll(async () => {
    t = await createTestApp({ transport });
    for (const id of ['rt-a', 'rt-b']) {
      const res = await t.send({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id) });
      expect(res.statusCode).toBe(201);
    }
    // Seven alerts, one minute apart: rt-a has chambers 1..5 (grades cycling), rt-b two thermocouple faults.
    const grades = ['notice', 'warning', 'alarm', 'critical', 'warning'] as const;
    for (let i = 0; i < 5; i++) seeded.push(await seedAlert(t.db.pool, { unitId: 'rt-a', kind: 'chamber_cold', chamber: i + 1, grade: grades[i], raisedAt: new Date(base + i * 60_000) }));
    for (let i = 0; i < 2; i++) seeded.push(await seedAlert(t.db.pool, { unitId: 'rt-b', kind: 'thermocouple_fault', thermocouple: i + 1, grade: 'warning', raisedAt: new Date(base + (5 + i) * 60_000) }));
  });
  afterAll(async () => t.close());

  const get = (url: string, key = t.keys.viewer) => t.send({ method: 'GET', url, headers: bearer(key) });
  const post = (url: string, payload: object | undefined, key = t.keys.operator) => t.send({ method: 'POST', url, headers: bearer(key), ...(payload ? { payload } : {}) });
  const future = (s: number) => new Date(Date.now() + s * 1000).toISOString();

  describe('GET /v1/alerts', () => {
    it('lists newest first with history and the caution', async () => {
      const res = await get('/v1/alerts');
      expect(res.statusCode).toBe(200);
      const body = res.json();
      expect(body.alerts.map((a: { id: string }) => a.id)).toEqual([...seeded].reverse().map((a) => a.id));
      expect(body.next).toBeNull();
      expect(body.caution).toMatch(/advises; it does not protect/);
      expect(body.alerts[0]).toMatchObject({ unitId: 'rt-b', kind: 'thermocouple_fault', thermocouple: 2, chamber: null, active: true, acknowledged: false, shelvedUntil: null, clearedAt: null });
      expect(body.alerts[0].history.map((h: { action: string }) => h.action)).toEqual(['raised']);
    });

    it('filters by unit, grade, minimum grade and kind', async () => {
      const ids = async (q: string) => (await get(`/v1/alerts?${q}`)).json().alerts.map((a: { id: string }) => a.id);
      expect(await ids('unitId=rt-b')).toEqual([seeded[6].id, seeded[5].id]);
      expect(await ids('unitId=rt-a&grade=warning')).toEqual([seeded[4].id, seeded[1].id]);
      expect(await ids('minGrade=alarm')).toEqual([seeded[3].id, seeded[2].id]);
      expect(await ids('kind=thermocouple_fault')).toEqual([seeded[6].id, seeded[5].id]);
      expect(await ids('kind=unit_silent')).toEqual([]);
    });

    it('pages with a cursor, newest first, each alert once', async () => {
      const seen: string[] = [];
      let url = '/v1/alerts?limit=2';
      let pages = 0;
      for (;;) {
        const body = (await get(url)).json();
        pages++;
        seen.push(...body.alerts.map((a: { id: string }) => a.id));
        if (!body.next) break;
        url = `/v1/alerts?limit=2&cursor=${encodeURIComponent(body.next)}`;
      }
      expect(pages).toBe(4);
      expect(seen).toEqual([...seeded].reverse().map((a) => a.id));
    });

    it('refuses a bad cursor, an unknown state or an unknown query field with 400', async () => {
      for (const q of ['cursor=not-a-cursor', 'state=burning', 'grade=severe', 'limit=0', 'colour=red']) {
        const res = await get(`/v1/alerts?${q}`);
        expect(res.statusCode, q).toBe(400);
        expect(res.json().error).toBe('bad_request');
      }
    });

    it("a key limited to a unit sees only that unit, gets 403 filtering by another, and 404 for another unit's alert", async () => {
      const scoped = await t.key('viewer', ['rt-b']);
      const res = await get('/v1/alerts', scoped);
      expect(res.json().alerts.map((a: { unitId: string }) => a.unitId)).toEqual(['rt-b', 'rt-b']);
      const other = await get('/v1/alerts?unitId=rt-a', scoped);
      expect(other.statusCode).toBe(403);
      expect(other.json().message).toContain('rt-a');
      expect((await get(`/v1/alerts/${seeded[0].id}`, scoped)).statusCode).toBe(404);
      expect((await post(`/v1/alerts/${seeded[0].id}/ack`, { by: 'shift operator 1' }, await t.key('operator', ['rt-b']))).statusCode).toBe(404);
    });
  });

  describe('GET /v1/alerts/:id', () => {
    it('gives one alert with its history; unknown or malformed ids are 404', async () => {
      const res = await get(`/v1/alerts/${seeded[2].id}`);
      expect(res.statusCode).toBe(200);
      expect(res.json()).toMatchObject({ id: seeded[2].id, unitId: 'rt-a', kind: 'chamber_cold', chamber: 3, grade: 'alarm', evidence: { seeded: true } });
      expect(res.json().caution).toBeTruthy();
      for (const id of ['00000000-0000-4000-8000-000000000000', 'nope']) {
        const r = await get(`/v1/alerts/${id}`);
        expect(r.statusCode).toBe(404);
        expect(r.json()).toMatchObject({ error: 'not_found' });
      }
    });
  });

  describe('alert actions', () => {
    it('ack: needs "by"; unknown alert 404; viewer 403; acknowledges once with a history row', async () => {
      const id = seeded[0].id;
      const missing = await post(`/v1/alerts/${id}/ack`, { comment: 'seen' });
      expect(missing.statusCode).toBe(400);
      expect(missing.json().details).toEqual([{ field: 'by', reason: 'required' }]);
      expect((await post(`/v1/alerts/${id}/ack`, { by: '' })).statusCode).toBe(400);
      expect((await post(`/v1/alerts/${id}/ack`, { by: 'shift operator 1', extra: 1 })).statusCode).toBe(400);
      expect((await post('/v1/alerts/00000000-0000-4000-8000-000000000000/ack', { by: 'shift operator 1' })).statusCode).toBe(404);
      expect((await post(`/v1/alerts/${id}/ack`, { by: 'shift operator 1' }, t.keys.viewer)).statusCode).toBe(403);
      const ok = await post(`/v1/alerts/${id}/ack`, { by: 'shift operator 1', comment: 'chamber 1 on the outage list' });
      expect(ok.statusCode).toBe(200);
      expect(ok.json()).toMatchObject({ acknowledged: true, acknowledgedBy: 'shift operator 1', active: true, closedAt: null });
      const again = await post(`/v1/alerts/${id}/ack`, { by: 'shift operator 2' });
      expect(again.statusCode).toBe(200);
      expect(again.json().acknowledgedBy).toBe('shift operator 1');
      expect(again.json().history.map((h: { action: string; by: string | null; comment: string | null }) => [h.action, h.by, h.comment])).toEqual([
        ['raised', null, null],
        ['acknowledged', 'shift operator 1', 'chamber 1 on the outage list'],
      ]);
    });

    it('shelve: needs by, until and reason; until must be in the future and within the longest shelf', async () => {
      const id = seeded[1].id;
      const cases: Array<[object, number, string]> = [
        [{ until: future(3600), reason: 'r' }, 400, 'by'],
        [{ by: 'shift operator 1', reason: 'r' }, 400, 'until'],
        [{ by: 'shift operator 1', until: future(3600) }, 400, 'reason'],
        [{ by: 'shift operator 1', until: 'tomorrow', reason: 'r' }, 400, 'until'],
        [{ by: 'shift operator 1', until: new Date(Date.now() - 60_000).toISOString(), reason: 'r' }, 422, 'until'],
        [{ by: 'shift operator 1', until: future(t.config.alerts.maxShelveS + 3600), reason: 'r' }, 422, 'until'],
      ];
      for (const [body, status, field] of cases) {
        const res = await post(`/v1/alerts/${id}/shelve`, body);
        expect(res.statusCode, JSON.stringify(body)).toBe(status);
        expect(JSON.stringify(res.json())).toContain(field);
      }
      // The two limits say what is allowed: ahead of now, and at most the longest shelf (7 days by default).
      const past = await post(`/v1/alerts/${id}/shelve`, { by: 'shift operator 1', until: new Date(Date.now() - 60_000).toISOString(), reason: 'r' });
      expect(past.json().message).toMatch(/must lie ahead of now .*at most 7 days \(CANSIGHT_ALERT_MAX_SHELVE_S\) ahead/);
      const far = await post(`/v1/alerts/${id}/shelve`, { by: 'shift operator 1', until: future(8 * 86_400), reason: 'r' });
      expect(far.json().message).toMatch(/is 8 days ahead; the longest shelf here is 7 days/);
      expect((await post('/v1/alerts/00000000-0000-4000-8000-000000000000/shelve', { by: 'shift operator 1', until: future(60), reason: 'r' })).statusCode).toBe(404);
      expect((await get(`/v1/alerts/${id}`)).json().history).toHaveLength(1);
    });

    it('shelve hides an alert from the active list until unshelved; unshelving twice changes nothing', async () => {
      const id = seeded[3].id;
      const until = future(7200);
      const res = await post(`/v1/alerts/${id}/shelve`, { by: 'shift supervisor 1', until, reason: 'fuel nozzle change tonight' });
      expect(res.statusCode).toBe(200);
      expect(res.json()).toMatchObject({ shelvedUntil: until, shelvedBy: 'shift supervisor 1', shelveReason: 'fuel nozzle change tonight' });
      const ids = async (q: string) => (await get(`/v1/alerts?${q}`)).json().alerts.map((a: { id: string }) => a.id);
      expect(await ids('state=shelved')).toEqual([id]);
      expect(await ids('state=active')).not.toContain(id);
      expect((await post(`/v1/alerts/${id}/unshelve`, { by: 'shift supervisor 1' })).json().shelvedUntil).toBeNull();
      const again = await post(`/v1/alerts/${id}/unshelve`, undefined);
      expect(again.statusCode).toBe(200);
      expect(again.json().history.map((h: { action: string }) => h.action)).toEqual(['raised', 'shelved', 'unshelved']);
      expect(await ids('state=active')).toContain(id);
      expect((await post(`/v1/alerts/${id}/unshelve`, { who: 'x' })).statusCode).toBe(400);
    });
  });

  describe('webhooks', () => {
    it('subscribe, list (no secrets), delivery log, delete; validation and roles', async () => {
      const good = { url: 'https://receiver.example.net/cansight', minGrade: 'alarm', secret: 'shared-secret-0123456789' };
      const bad: Array<[object, number]> = [
        [{ ...good, secret: 'short' }, 400],
        [{ ...good, minGrade: 'severe' }, 400],
        [{ url: good.url, minGrade: 'alarm' }, 400],
        [{ ...good, url: 'ftp://receiver.example.net/x' }, 422],
        [{ ...good, unitIds: ['no-such-unit'] }, 422],
      ];
      for (const [body, status] of bad) expect((await post('/v1/webhooks', body, t.keys.admin)).statusCode, JSON.stringify(body)).toBe(status);
      // An enum names its allowed values once, not one "must be equal to constant" per value.
      const grade = await post('/v1/webhooks', { ...good, minGrade: 'severe' }, t.keys.admin);
      expect(grade.json()).toMatchObject({ message: 'Body field "minGrade": must be one of "notice", "warning", "alarm", "critical".', details: [{ field: 'minGrade', reason: 'must be one of "notice", "warning", "alarm", "critical"' }] });
      const empty = await t.send({ method: 'POST', url: '/v1/webhooks', headers: bearer(t.keys.admin) });
      expect(empty.statusCode).toBe(400);
      expect(empty.json().message).toMatch(/^A JSON body is required/);
      expect((await post('/v1/webhooks', good, t.keys.operator)).statusCode).toBe(403);

      const created = await post('/v1/webhooks', { ...good, unitIds: ['rt-a'] }, t.keys.admin);
      expect(created.statusCode).toBe(201);
      const w = created.json();
      expect(w).toMatchObject({ url: good.url, minGrade: 'alarm', unitIds: ['rt-a'], deletedAt: null });
      expect(JSON.stringify(w)).not.toContain(good.secret);
      const list = await get('/v1/webhooks', t.keys.admin);
      expect(list.json().webhooks.map((x: { id: string }) => x.id)).toContain(w.id);
      expect(JSON.stringify(list.json())).not.toContain(good.secret);
      expect((await get('/v1/webhooks', t.keys.viewer)).statusCode).toBe(403);

      const log = await get(`/v1/webhooks/${w.id}/deliveries`, t.keys.admin);
      expect(log.statusCode).toBe(200);
      expect(log.json()).toEqual({ deliveries: [], next: null });
      expect((await get(`/v1/webhooks/${w.id}/deliveries?cursor=zzz`, t.keys.admin)).statusCode).toBe(400);

      const del = await t.send({ method: 'DELETE', url: `/v1/webhooks/${w.id}`, headers: bearer(t.keys.admin) });
      expect(del.statusCode).toBe(204);
      expect((await t.send({ method: 'DELETE', url: `/v1/webhooks/${w.id}`, headers: bearer(t.keys.admin) })).statusCode).toBe(404);
      expect((await get('/v1/webhooks', t.keys.admin)).json().webhooks.map((x: { id: string }) => x.id)).not.toContain(w.id);
      expect((await get(`/v1/webhooks/${w.id}/deliveries`, t.keys.admin)).statusCode).toBe(200);
      expect((await get('/v1/webhooks/00000000-0000-4000-8000-000000000000/deliveries', t.keys.admin)).statusCode).toBe(404);
    });

    it('an admin key limited to units subscribes within them only', async () => {
      const scoped = await t.key('admin', ['rt-b']);
      const body = { url: 'https://receiver.example.net/b', minGrade: 'warning', secret: 'shared-secret-0123456789' };
      expect((await post('/v1/webhooks', body, scoped)).statusCode).toBe(403);
      expect((await post('/v1/webhooks', { ...body, unitIds: ['rt-a'] }, scoped)).statusCode).toBe(403);
      expect((await post('/v1/webhooks', { ...body, unitIds: ['rt-b'] }, scoped)).statusCode).toBe(201);
      const seen = (await get('/v1/webhooks', scoped)).json().webhooks;
      expect(seen.every((w: { unitIds: string[] | null }) => w.unitIds !== null && w.unitIds.every((u) => u === 'rt-b'))).toBe(true);
    });
  });
});
