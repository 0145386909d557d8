/**
 * Maintenance events through the API: recorded by an operator in ring time, read by a viewer,
 * removed by an admin; refused with the field named when they do not fit the unit; drawn on
 * the trend pictures and listed in the pre-outage review.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { insertAnalyses } from '../../services/db/synthetic.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';

const MIN = 60_000;
const T0 = Date.parse('2026-03-10T00:00:00Z');
let t: TestApp;
const post = (body: object, key = t.keys.operator) => t.app.inject({ method: 'POST', url: '/v1/units/ev-1/events', headers: bearer(key), payload: body });

beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('ev-1') });
  await insertAnalyses(t.db.pool, 'ev-1', Array.from({ length: 120 }, (_, i) => ({
    tsMs: T0 + i * MIN, loadFraction: 0.8, spreadC: 25, spreadLimitC: 40, validity: Array(18).fill(0), tcDeviationC: Array(18).fill(0),
    chamberDeviationC: Array(10).fill(0), chamberResidualC: Array(10).fill(0), swirlDeg: 60, baselineVersion: 1,
  })));
  // Analysis has come up to the last of those rings.
  await t.db.pool.query(`UPDATE analysis_progress SET watermark_ts = $1 WHERE unit_id = 'ev-1'`, [new Date(T0 + 119 * MIN)]);
});
afterAll(async () => t.close());

describe('maintenance events', () => {
  it('records a thermocouple replaced in ring time and says what it does', async () => {
    const r = await post({ kind: 'thermocouple_replaced', at: new Date(T0 + 30 * MIN).toISOString(), by: 'instrument technician', note: 'probe 7 and its lead replaced', thermocouples: [7] });
    expect(r.statusCode, r.body).toBe(201);
    const e = r.json();
    expect(e).toMatchObject({ unitId: 'ev-1', kind: 'thermocouple_replaced', at: new Date(T0 + 30 * MIN).toISOString(), thermocouples: [7], chambers: null, by: 'instrument technician', learntOffsetsC: {} });
    expect(e.effect).toContain('learnt again from the 30 steady rings');
    // Rings after it were analysed already: they are judged again from its time.
    expect(e.effect).toContain('the rings from then on are judged again with it');
    const asked = await t.db.pool.query(`SELECT reanalyse_from FROM analysis_progress WHERE unit_id = 'ev-1'`);
    expect((asked.rows[0].reanalyse_from as Date).getTime()).toBe(T0 + 30 * MIN);
    const wash = await post({ kind: 'compressor_wash', at: new Date(T0 + 90 * MIN).toISOString(), by: 'shift operator 1' });
    expect(wash.statusCode).toBe(201);
    const nozzles = await post({ kind: 'nozzles_worked', at: new Date(T0 + 100 * MIN).toISOString(), by: 'combustion engineer', chambers: [4, 4, 3] });
    expect(nozzles.json().chambers).toEqual([3, 4]);
    expect(nozzles.json().effect).toContain('A new baseline period starts');
    expect(nozzles.json().effect).toContain('chambers 3, 4');
  });

  it('refuses what does not fit the unit, naming the field', async () => {
    const at = new Date(T0).toISOString();
    const cases: Array<[object, number, string]> = [
      [{ kind: 'thermocouple_replaced', at, by: 'x' }, 422, 'thermocouples'],
      [{ kind: 'thermocouple_replaced', at, by: 'x', thermocouples: [19] }, 422, '18 thermocouples'],
      [{ kind: 'nozzles_worked', at, by: 'x', chambers: [11] }, 422, '10 chambers'],
      [{ kind: 'compressor_wash', at, by: 'x', thermocouples: [1] }, 422, 'thermocouple_replaced'],
      [{ kind: 'compressor_wash', at: new Date(Date.now() + 3 * 86_400_000).toISOString(), by: 'x' }, 422, 'ahead'],
      [{ kind: 'borescope', at, by: 'x' }, 400, 'compressor_wash'],
      [{ kind: 'other', by: 'x' }, 400, 'at'],
    ];
    for (const [body, status, word] of cases) {
      const r = await post(body);
      expect(r.statusCode, JSON.stringify(body)).toBe(status);
      expect(r.body).toContain(word);
    }
    expect((await post({ kind: 'other', at, by: 'x' }, t.keys.viewer)).statusCode).toBe(403);
  });

  it('lists them oldest first, in a window when asked, and an admin removes one', async () => {
    const listed = await t.app.inject({ url: '/v1/units/ev-1/events', headers: bearer(t.keys.viewer) });
    expect(listed.statusCode, listed.body).toBe(200);
    const all = listed.json().events;
    expect(all.map((e: { kind: string }) => e.kind)).toEqual(['thermocouple_replaced', 'compressor_wash', 'nozzles_worked']);
    const some = (await t.app.inject({ url: `/v1/units/ev-1/events?from=${new Date(T0 + 60 * MIN).toISOString()}&to=${new Date(T0 + 95 * MIN).toISOString()}`, headers: bearer(t.keys.viewer) })).json().events;
    expect(some.map((e: { kind: string }) => e.kind)).toEqual(['compressor_wash']);
    const id = all[2].id;
    expect((await t.app.inject({ method: 'DELETE', url: `/v1/units/ev-1/events/${id}`, headers: bearer(t.keys.operator) })).statusCode).toBe(403);
    expect((await t.app.inject({ method: 'DELETE', url: `/v1/units/ev-1/events/${id}`, headers: bearer(t.keys.admin) })).statusCode).toBe(204);
    const again = await t.app.inject({ method: 'DELETE', url: `/v1/units/ev-1/events/${id}`, headers: bearer(t.keys.admin) });
    expect(again.statusCode).toBe(404);
    expect(again.json().message).toContain(id);
  });

  it('draws them on the chamber trend and the spread trend, and lists them in the review', async () => {
    const win = `from=${new Date(T0 - MIN).toISOString()}&to=${new Date(T0 + 121 * MIN).toISOString()}`;
    for (const url of [`/v1/units/ev-1/chambers/4/trend.svg?${win}`, `/v1/units/ev-1/spread.svg?${win}`]) {
      const svg = (await t.app.inject({ url, headers: bearer(t.keys.viewer) })).body;
      expect(svg.match(/<g class="event">/g), url).toHaveLength(2);
      expect(svg).toContain('<title>thermocouple replaced: 7</title>');
      expect(svg).toContain('<title>compressor wash</title>');
    }
    const html = (await t.app.inject({ url: `/v1/units/ev-1/review?${win}`, headers: bearer(t.keys.viewer) })).body;
    const section = html.slice(html.indexOf('Maintenance events in the window'), html.indexOf('Calls to inspect'));
    expect(section).toContain('thermocouple replaced: 7');
    expect(section).toContain('probe 7 and its lead replaced');
    expect(section).toContain('instrument technician');
  });
});
