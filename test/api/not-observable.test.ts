/**
 * A chamber the latest ring could not see (its plume over failed thermocouples) is shown as
 * not observable, never as a healthy 0: in the status and the chamber table (observable false,
 * null figures, the reason), on the ring picture (drawn apart, the reason in its title) and in
 * the review (not judged, no "no action" that would clear it for the outage).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { NOT_OBSERVABLE, swirlDeg } from '../../services/core/index.ts';
import { insertAnalyses, type SyntheticAnalysis } from '../../services/db/synthetic.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { CONFIG, MIN_MS } from './read-fixtures.ts';

let t: TestApp;
const get = (url: string) => t.app.inject({ url, headers: bearer(t.keys.viewer) });

beforeAll(async () => {
  t = await createTestApp();
  await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody('blind-a', { name: 'Blind unit' }) });
  const endMs = Math.floor(Date.now() / MIN_MS) * MIN_MS - MIN_MS;
  const rows: SyntheticAnalysis[] = [];
  for (let i = 9; i >= 0; i--) {
    // Thermocouples 9, 10 and 11 missing; chamber 6's plume lies over them: no estimate of it.
    const validity = Array.from({ length: 18 }, (_, k) => (k >= 8 && k <= 10 ? 1 : 0));
    rows.push({
      tsMs: endMs - i * MIN_MS,
      loadFraction: 0.9,
      spreadC: 20,
      spreadLimitC: 40,
      validity,
      tcDeviationC: validity.map((v, k) => (v ? null : Math.sin(k))),
      chamberDeviationC: Array.from({ length: 10 }, (_, k) => (k === 5 ? NaN : 1.5 * Math.cos(k))),
      swirlDeg: swirlDeg(CONFIG.swirl.curve, 0.9),
      worstChamber: 1,
      worstLikelihood: 0.3,
      baselineVersion: null,
    });
  }
  await insertAnalyses(t.db.pool, 'blind-a', rows);
});
afterAll(async () => t?.close());

describe('a chamber not observable in the latest ring', () => {
  it('status and the chamber table say so, with null figures and the reason', async () => {
    const status = (await get('/v1/units/blind-a/status')).json();
    const c6 = status.chambers[5];
    expect(c6).toMatchObject({ chamber: 6, deviationDegC: null, uncertaintyDegC: null, observable: false, notObservableReason: NOT_OBSERVABLE.noProbeUnderPlume });
    expect(status.chambers.filter((c: { observable: boolean }) => !c.observable).map((c: { chamber: number }) => c.chamber)).toEqual([6]);
    const table = (await get('/v1/units/blind-a/chambers')).json();
    expect(table.chambers[5]).toMatchObject({ chamber: 6, deviationC: null, uncertaintyC: null, residualC: null, observable: false, notObservableReason: NOT_OBSERVABLE.noProbeUnderPlume });
    expect(table.chambers[4]).toMatchObject({ chamber: 5, observable: true, notObservableReason: null });
  });

  it('the ring picture draws it apart and names the reason', async () => {
    const svg = (await get('/v1/units/blind-a/ring.svg')).body;
    expect(svg).toMatch(/<g class="chamber not-observable" data-chamber="6"/);
    expect(svg.match(/class="chamber not-observable"/g)).toHaveLength(1);
    expect(svg).toContain(`<title>chamber 6: ${NOT_OBSERVABLE.noProbeUnderPlume}`);
  });

  it('the review does not clear it for the outage', async () => {
    const html = (await get('/v1/units/blind-a/review')).body;
    expect(html).toContain('Not judged: chamber 6 is not observable');
    expect(html).not.toMatch(/chamber 6<\/td>(?:(?!<\/tr>).)*No action indicated/s);
    const csv = (await get('/v1/units/blind-a/review?format=csv')).body;
    const row = csv.split('\n').find((l) => l.startsWith('chamber,chamber,6,'));
    expect(row).toContain('Not judged');
  });
});
