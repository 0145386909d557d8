/**
 * The optional combustion mode of a ring: accepted by the JSON batch, NDJSON and CSV endpoints,
 * stored with the ring and read back; a code that is not one is refused with the field named;
 * a ring without one stores null (a unit without modes works as before).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestApp, type TestApp } from '../helpers/app.ts';
import { readRings } from '../../services/db/rings.ts';
import { readRingsBetween } from '../../services/db/analysis-rings.ts';
import { BASE_MS, TC, ndjson, postBatch, postCsv, postNdjson, registerUnit, ring, tsAt } from './fixtures.ts';

let t: TestApp;
beforeAll(async () => {
  t = await createTestApp();
  for (const id of ['md-1', 'md-2', 'md-3']) await registerUnit(t, id);
});
afterAll(async () => t?.close());

const modes = async (unitId: string) => (await readRings(t.db.pool, unitId, BASE_MS, BASE_MS + 3_600_000, 100)).map((r) => r.mode);

describe('combustion mode of a ring', () => {
  it('JSON batch: stored per ring, null where left out; a bad code is refused by field', async () => {
    const res = await postBatch(t, 'md-1', [ring(0, { mode: 'premix' }), ring(1), ring(2, { mode: 'diffusion' }), ring(3, { mode: 'no spaces allowed' }), ring(4, { mode: 7 }), ring(5, { mode: null })]);
    expect(res.statusCode, res.body).toBe(200);
    const body = res.json();
    expect(body.accepted).toBe(4);
    expect(body.rejected.map((r: { index: number; field: string }) => [r.index, r.field])).toEqual([[3, 'mode'], [4, 'mode']]);
    expect(await modes('md-1')).toEqual(['premix', null, 'diffusion', null]);
    // The analysis reads it back per ring.
    const c = await t.db.pool.connect();
    try {
      const cols = await readRingsBetween(c, 'md-1', BASE_MS, BASE_MS + 10_000, 100);
      expect(cols.mode).toEqual(['premix', null, 'diffusion', null]);
    } finally {
      c.release();
    }
  });

  it('NDJSON: a mode on each line', async () => {
    const res = await postNdjson(t, ndjson([{ unitId: 'md-2', ...ring(0, { mode: 'm6' }) }, { unitId: 'md-2', ...ring(1, { mode: 'm4.1' }) }]));
    expect(res.statusCode, res.body).toBe(200);
    expect(res.json().accepted).toBe(2);
    expect(await modes('md-2')).toEqual(['m6', 'm4.1']);
  });

  it('CSV: an optional mode column, empty cells for none', async () => {
    const head = ['ts', 'load_mw', 'ambient_c', 'ambient_kpa', 'speed_pct', 'mode', ...Array.from({ length: TC }, (_, k) => `tc${k + 1}`)].join(',');
    const line = (i: number, mode: string) => {
      const r = ring(i);
      return [tsAt(i), r.loadMw, r.ambientC, r.ambientKPa, r.speedPct, mode, ...(r.exhaustC as number[])].join(',');
    };
    const res = await postCsv(t, 'md-3', [head, line(0, 'premix'), line(1, ''), line(2, 'lean')].join('\n') + '\n');
    expect(res.statusCode, res.body).toBe(200);
    expect(res.json().accepted).toBe(3);
    expect(await modes('md-3')).toEqual(['premix', null, 'lean']);
  });
});
