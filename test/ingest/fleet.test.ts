/**
 * A request that carries rings of many units looks their configurations up together: one
 * statement per chunk of the stream that names units not seen yet in the request, not one per
 * unit (a gateway sending 1,000 units a second paid 1,000 round trips per request). Counted at
 * the ingest run's lookup, on a real database; every ring is still judged against its own
 * unit's thermocouple count, and unknown units are still refused line by line.
 */
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { IngestRun } from '../../services/ingest/run.ts';
import { createTestApp, type TestApp } from '../helpers/app.ts';
import { ndjson, postNdjson, registerUnit, ring, TC } from './fixtures.ts';

const UNITS = 120;
let t: TestApp;
beforeAll(async () => {
  t = await createTestApp();
  for (let u = 0; u < UNITS; u++) await registerUnit(t, `gw-${u}`);
  await registerUnit(t, 'gw-short', { thermocouples: { count: 12, firstAngleDeg: 0 } });
});
afterAll(async () => t?.close());

describe('a many-unit NDJSON request', () => {
  it('looks up all its units in one statement, stores every ring, and still judges each against its own unit', async () => {
    const lookups = vi.spyOn(IngestRun.prototype, 'unitVersionsMany');
    const lines = Array.from({ length: UNITS }, (_, u) => ({ unitId: `gw-${u}`, ...ring(u) }));
    lines.push({ unitId: 'gw-short', ...ring(0) }); // 18 readings for a 12-thermocouple unit
    lines.push({ unitId: 'gw-nowhere', ...ring(0) });
    const res = await postNdjson(t, ndjson(lines));
    expect(res.statusCode, res.body).toBe(200);
    expect(res.json()).toMatchObject({ accepted: UNITS, duplicates: 0, rejectedCount: 2 });
    expect(res.json().rejected).toEqual([
      { index: UNITS + 1, field: 'exhaustC', reason: expect.stringContaining(`has ${TC} readings`) },
      { index: UNITS + 2, field: 'unitId', reason: 'no unit gw-nowhere is registered' },
    ]);
    // The body reached the route in one chunk: one lookup for all 122 units named.
    expect(lookups).toHaveBeenCalledTimes(1);
    expect(lookups.mock.calls[0][0]).toHaveLength(UNITS + 2);
    lookups.mockRestore();
  });
});
