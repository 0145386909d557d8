/**
 * The words the pictures write for people: every phase of the start picture in full ("full
 * speed no load", not a maker's abbreviation), and a spread over its limit called "above limit"
 * in the same case in the ring, fleet and spread pictures.
 */
import { describe, expect, it } from 'vitest';
import { START_PHASES } from '../../services/core/starts.ts';
import { ABOVE_LIMIT } from '../../services/api/svg/draw.ts';
import { fleetSvg } from '../../services/api/svg/fleet.ts';
import { ringSvg } from '../../services/api/svg/ring.ts';
import { spreadSvg } from '../../services/api/svg/spread.ts';
import { startSvg } from '../../services/api/svg/start.ts';

const T0 = Date.parse('2026-03-01T06:00:00Z');
/** The text content of every <text> element, in order. */
const texts = (svg: string) => [...svg.matchAll(/<text[^>]*>([^<]*)<\/text>/g)].map((m) => m[1]);

describe('picture wording', () => {
  it('names every phase of a start in words, full speed no load written in full', () => {
    const svg = startSvg({
      title: 'start', subtitle: 'completed', temperatureUnit: 'C', crankMs: T0, endMs: T0 + 900_000,
      phases: START_PHASES.map((phase, i) => ({ phase, startMs: T0 + i * 100_000, durationS: 100 })),
      trace: [{ tMs: T0, speedPct: 0, fuelFlowKgS: 0, spreadDegC: null, chamberDegC: null }],
      unlitChambers: [], crossfireCompleteS: null, outcome: 'completed',
    });
    const words = texts(svg);
    expect(words).toContain('full speed no load');
    expect(svg).not.toMatch(/FSNL/i);
  });

  it(`writes "${ABOVE_LIMIT}" in lower case in the ring, fleet and spread pictures`, () => {
    const ring = ringSvg({
      title: 'ring', ts: '2026-03-01T06:00:00Z', temperatureUnit: 'C', view: 'downstream', loadFraction: 0.9, swirlDeg: 50, spreadC: 60, limitC: 40,
      thermocouples: Array.from({ length: 12 }, (_, i) => ({ number: i + 1, angleDeg: i * 30, readingC: 500, deviationC: i === 3 ? -30 : 2, valid: true, reason: null })),
      chambers: Array.from({ length: 6 }, (_, k) => ({ number: k + 1, angleDeg: k * 60, plumeAngleDeg: k * 60 + 50, deviationC: 0 })),
    });
    const fleet = fleetSvg([{ unitId: 'u-1', name: 'Unit 1', site: 'Site', temperatureUnit: 'C', lastRingTs: '2026-03-01T06:00:00Z', freshness: 'live', spreadC: 60, spreadLimitC: 40, worstGrade: 'alarm', activeAlerts: 1, unacknowledged: 1, coverage: { valid: 12, total: 12 } }], T0);
    const spread = spreadSvg({ title: 'spread', subtitle: '', temperatureUnit: 'C', fromMs: T0 - 3_600_000, toMs: T0, points: [{ tMs: T0 - 1_800_000, meanC: 60, minC: 55, maxC: 65, limitC: 40 }], alerts: [] });
    for (const [name, svg] of Object.entries({ ring, fleet, spread })) {
      expect(texts(svg).some((t) => t.includes(ABOVE_LIMIT)), name).toBe(true);
      expect(svg, name).not.toMatch(/ABOVE LIMIT|Above limit/);
    }
  });
});
