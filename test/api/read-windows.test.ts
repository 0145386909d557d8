/**
 * Read windows follow ring time. Without from and to, trends, series, the spread picture, the
 * start list and the review end at the unit's last ring, so a unit whose rings ended months ago
 * (a history import, a unit laid up) shows its last days, not an empty stretch of the wall
 * clock; every such reply says which window it used in the x-cansight-window header.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { DAY_MS, seedUnit, type Seeded } from './read-fixtures.ts';

let t: TestApp;
let seeded: Seeded;
const get = (url: string) => t.app.inject({ url, headers: bearer(t.keys.viewer) });

/** The window a reply says it used. */
function windowOf(res: { headers: Record<string, unknown> }): { from: number; to: number; endsAt: string } {
  const h = String(res.headers['x-cansight-window'] ?? '');
  const m = /^from=([^;]+); to=([^;]+); ends-at=(request|last-ring|clock)$/.exec(h);
  expect(m, `x-cansight-window: ${h}`).not.toBeNull();
  return { from: Date.parse(m![1]), to: Date.parse(m![2]), endsAt: m![3] };
}

beforeAll(async () => {
  t = await createTestApp();
  for (const id of ['old-1', 'empty-1']) expect((await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id) })).statusCode).toBe(201);
  // Rings, analysis and rollups that end 90 days before today.
  seeded = await seedUnit(t.db.pool, 'old-1', Date.now() - 90 * DAY_MS);
});
afterAll(async () => t.close());

describe('read windows in ring time', () => {
  it('the minute series of a unit whose rings ended 90 days ago shows its last day, and says so', async () => {
    const res = await get('/v1/units/old-1/analysis?every=1m');
    expect(res.statusCode).toBe(200);
    expect(res.json().buckets.length).toBeGreaterThan(100);
    const w = windowOf(res);
    expect(w.endsAt).toBe('last-ring');
    expect(w.to).toBe(seeded.endMs + 1000);
    expect(w.to - w.from).toBe(DAY_MS);
  });

  it('a window the request gives is kept as given (here: the last wall-clock day, which is empty)', async () => {
    const to = new Date().toISOString();
    const from = new Date(Date.now() - DAY_MS).toISOString();
    const res = await get(`/v1/units/old-1/analysis?every=1m&from=${from}&to=${to}`);
    expect(res.json().buckets).toEqual([]);
    expect(windowOf(res)).toEqual({ from: Date.parse(from), to: Date.parse(to), endsAt: 'request' });
  });

  it('the chamber trend, the hourly series, the spread picture, the start list and the review end at the last ring', async () => {
    const trend = await get('/v1/units/old-1/chambers/4/trend');
    expect(trend.statusCode).toBe(200);
    expect(trend.json().points.length).toBeGreaterThan(0);
    expect(windowOf(trend)).toMatchObject({ endsAt: 'last-ring', to: seeded.endMs + 1000 });
    const hourly = await get('/v1/units/old-1/analysis?every=1h');
    expect(hourly.json().buckets.length).toBeGreaterThan(24);
    for (const url of ['/v1/units/old-1/spread.svg', '/v1/units/old-1/chambers/4/trend.svg', '/v1/units/old-1/starts', '/v1/units/old-1/review']) {
      const res = await get(url);
      expect(res.statusCode, url).toBe(200);
      expect(windowOf(res).endsAt, url).toBe('last-ring');
      expect(windowOf(res).to, url).toBeLessThanOrEqual(seeded.endMs + 1000);
      expect(windowOf(res).to, url).toBeGreaterThan(seeded.endMs - DAY_MS);
    }
  });

  it('a unit with no ring yet falls back to the clock, and says so', async () => {
    const res = await get('/v1/units/empty-1/analysis?every=1h');
    expect(res.statusCode).toBe(200);
    const w = windowOf(res);
    expect(w.endsAt).toBe('clock');
    expect(Math.abs(w.to - Date.now())).toBeLessThan(60_000);
  });
});
