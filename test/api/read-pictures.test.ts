/**
 * The pictures, parsed as XML and checked: every thermocouple drawn, invalid ones marked with
 * their reason, chamber labels where the geometry puts them, plumes where the swirl carries them,
 * the trend's band, drift line and alert marks, the fleet tiles worst first.
 */
import { XMLParser, XMLValidator } from 'fast-xml-parser';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { DAY_MS, seedUnit, type Seeded } from './read-fixtures.ts';

let t: TestApp;
let seeded: Seeded;
const get = (url: string) => t.app.inject({ url, headers: bearer(t.keys.viewer) });

type Node = Record<string, unknown>;
const parser = new XMLParser({ ignoreAttributes: false, attributeNamePrefix: '@_', isArray: (name) => ['g', 'text', 'path', 'rect', 'line', 'circle', 'title'].includes(name) });

function parse(svg: string): Node {
  expect(XMLValidator.validate(svg)).toBe(true);
  const doc = parser.parse(svg) as Node;
  expect(doc.svg).toBeDefined();
  return doc.svg as Node;
}

/** Every element (with its tag) in document order. */
function elements(node: unknown, tag = 'svg', out: Array<{ tag: string; node: Node }> = []): Array<{ tag: string; node: Node }> {
  if (Array.isArray(node)) {
    for (const n of node) elements(n, tag, out);
    return out;
  }
  if (node === null || typeof node !== 'object') return out;
  out.push({ tag, node: node as Node });
  for (const [k, v] of Object.entries(node as Node)) if (!k.startsWith('@_') && k !== '#text') elements(v, k, out);
  return out;
}

const withClass = (root: Node, cls: string) => elements(root).filter((e) => String(e.node['@_class'] ?? '').split(' ').includes(cls));
const textOf = (n: Node) => String((n['#text'] as string | number | undefined) ?? '');

beforeAll(async () => {
  t = await createTestApp();
  for (const id of ['pic-a', 'pic-b', 'pic-up']) {
    await t.app.inject({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: unitBody(id, { name: `Unit ${id}`, ...(id === 'pic-up' ? { view: 'upstream' } : {}) }) });
  }
  seeded = await seedUnit(t.db.pool, 'pic-a', Date.now());
  await seedUnit(t.db.pool, 'pic-up', Date.now());
});
afterAll(async () => t.close());

/** Screen position of the ring plot's chamber boxes (ring.ts: centre 280,318; radius 245). */
function chamberXY(angleDeg: number, view: 'upstream' | 'downstream'): [number, number] {
  const a = ((view === 'upstream' ? -angleDeg : angleDeg) * Math.PI) / 180;
  return [280 + 245 * Math.sin(a), 318 - 245 * Math.cos(a)];
}

describe('ring.svg', () => {
  for (const [unit, view] of [['pic-a', 'downstream'], ['pic-up', 'upstream']] as const) {
    it(`draws every thermocouple, marks the invalid one, and puts chamber labels and plumes where the geometry says (${view})`, async () => {
      const res = await get(`/v1/units/${unit}/ring.svg`);
      expect(res.statusCode).toBe(200);
      expect(res.headers['content-type']).toMatch(/^image\/svg\+xml/);
      const svg = parse(res.body);
      const tcs = withClass(svg, 'thermocouple');
      expect(tcs.map((e) => Number(e.node['@_data-thermocouple'])).sort((a, b) => a - b)).toEqual(Array.from({ length: 18 }, (_, i) => i + 1));
      const invalid = withClass(svg, 'invalid');
      expect(invalid).toHaveLength(1);
      expect(invalid[0].node['@_data-thermocouple']).toBe('7');
      expect(invalid[0].node['@_data-reason']).toBe('out_of_range');
      expect(JSON.stringify(invalid[0].node)).toContain('not used (out_of_range)');
      for (const tc of tcs) expect(Number(tc.node['@_data-angle'])).toBeCloseTo((10 + (Number(tc.node['@_data-thermocouple']) - 1) * 20) % 360, 2);
      const chambers = withClass(svg, 'chamber');
      expect(chambers).toHaveLength(10);
      for (const ch of chambers) {
        const k = Number(ch.node['@_data-chamber']);
        const angle = (k - 1) * 36;
        expect(Number(ch.node['@_data-angle'])).toBeCloseTo(angle, 2);
        // At load 0.9 the swirl lies between the knots (0.6, 74°) and (1.0, 55°): 74 − 0.75 × 19 = 59.75°, sense +1.
        expect(Number(ch.node['@_data-plume-angle'])).toBeCloseTo((angle + 59.75) % 360, 1);
        const label = (ch.node.text as Node[])[0];
        expect(textOf(label)).toBe(`C${k}`);
        const [x, y] = chamberXY(angle, view);
        expect(Number(label['@_x'])).toBeCloseTo(x, 1);
        expect(Number(label['@_y'])).toBeCloseTo(y + 4, 1);
      }
      const spread = withClass(svg, 'spread')[0];
      expect(textOf(spread.node)).toMatch(/exhaust spread \d+\.\d °C · limit 40\.0 °C/);
    });
  }

  it('draws the ring nearest the time asked for', async () => {
    const at = new Date(seeded.endMs - 59.6 * 60_000).toISOString();
    const res = await get(`/v1/units/pic-a/ring.svg?at=${at}`);
    expect(res.statusCode).toBe(200);
    expect(res.body).toContain(new Date(seeded.endMs - 60 * 60_000).toISOString().replace('.000Z', 'Z'));
  });

  it('says there is nothing to draw for a unit without analysis, and refuses a bad time', async () => {
    const res = await get('/v1/units/pic-b/ring.svg');
    expect(res.statusCode).toBe(200);
    expect(parse(res.body)).toBeDefined();
    expect(res.body).toContain('No analysed ring yet');
    expect((await get('/v1/units/pic-b/ring.svg?at=noon')).statusCode).toBe(400);
  });
});

describe('trend.svg and spread.svg', () => {
  it('draws the chamber residual with its band, drift line and alert marks', async () => {
    const res = await get(`/v1/units/pic-a/chambers/4/trend.svg?from=${new Date(seeded.endMs - 90 * DAY_MS).toISOString()}&to=${new Date(seeded.endMs + 60_000).toISOString()}`);
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^image\/svg\+xml/);
    const svg = parse(res.body);
    expect(withClass(svg, 'residual')).toHaveLength(1);
    expect(withClass(svg, 'baseline-band')).toHaveLength(1);
    const drift = withClass(svg, 'drift');
    expect(drift).toHaveLength(1);
    expect(Number(drift[0].node['@_y2'])).toBeGreaterThan(Number(drift[0].node['@_y1'])); // sinking residual: line goes down the page
    const marks = withClass(svg, 'alert').map((e) => e.node['@_data-grade']);
    expect(marks).toContain('alarm');
    expect(marks).toContain('notice');
    expect(res.body).toContain('drift -6.00 °C per 30 days');
    expect(res.body).toContain('normal band (baseline v1)');
  });

  it('draws the spread with its limit and marks nothing above the limit when the spread is below it', async () => {
    const res = await get(`/v1/units/pic-a/spread.svg?from=${new Date(seeded.endMs - 3 * 3_600_000).toISOString()}&to=${new Date(seeded.endMs + 60_000).toISOString()}`);
    expect(res.statusCode).toBe(200);
    const svg = parse(res.body);
    expect(withClass(svg, 'spread')).toHaveLength(1);
    expect(withClass(svg, 'limit')).toHaveLength(1);
    expect(withClass(svg, 'over-limit')).toHaveLength(0);
    const long = await get(`/v1/units/pic-a/spread.svg?from=${new Date(seeded.endMs - 300 * DAY_MS).toISOString()}`);
    expect(long.statusCode).toBe(200);
    expect(withClass(parse(long.body), 'spread')).toHaveLength(1);
    expect((await get(`/v1/units/pic-a/spread.svg?from=${new Date(Date.now() - 500 * DAY_MS).toISOString()}`)).statusCode).toBe(400);
  });
});

describe('fleet.svg', () => {
  it('draws one tile per unit, worst first, with the grade in words', async () => {
    const res = await get('/v1/fleet.svg');
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^image\/svg\+xml/);
    const svg = parse(res.body);
    const tiles = withClass(svg, 'unit-tile');
    expect(tiles.map((e) => e.node['@_data-unit'])).toEqual(['pic-a', 'pic-up', 'pic-b']);
    expect(tiles[0].node['@_data-grade']).toBe('alarm');
    expect(tiles[2].node['@_data-freshness']).toBe('no_data');
    expect(res.body).toContain('17/18 thermocouples valid');
    expect(res.body).toContain('Cansight advises; it does not protect.');
  });
});
