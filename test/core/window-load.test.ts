/**
 * The drifting-alone window test and the load: a plume that moves with the swirl as the load
 * changes changes a flank thermocouple's residual by tens of degrees; that must not read as a
 * sensor drifting, while the same change at a held load still does.
 */
import { describe, expect, it } from 'vitest';
import { ringFromChambers, swirlDeg, windowValidity } from '../../services/core/index.ts';
import { demoCurve, mulberry32, unitConfig } from './helpers.ts';

describe('drifting alone and the load', () => {
  // Ten chambers, one thermocouple each, a fixed chamber fingerprint of up to ±30 °C; the load
  // ramps from 0.6 to 0.9 over the window, so the swirl turns every plume.
  const cfg = unitConfig(10, 1, 5, 0, 1, demoCurve);
  const kernel = { shape: 'von-mises' as const, widthDeg: 0.5 * 36 };
  const rand = mulberry32(1);
  const fingerprint = Float64Array.from({ length: 10 }, () => (rand() - 0.5) * 60);
  const loads: number[] = [];
  const rings: Float64Array[] = [];
  for (let t = 0; t < 60; t++) {
    const L = 0.6 + (0.3 * t) / 59;
    loads.push(L);
    rings.push(ringFromChambers(cfg, fingerprint, L, 550, kernel));
  }

  it('without the loads, a flank thermocouple of a turning plume looks like a lone drift', () => {
    expect(Math.abs(swirlDeg(cfg.swirl.curve, 0.6) - swirlDeg(cfg.swirl.curve, 0.9))).toBeGreaterThan(5);
    const v = windowValidity(rings, 10);
    expect(v.filter((x) => x.reason === 'drifting_alone').length).toBeGreaterThan(0);
  });

  it('calls no thermocouple drifting alone while the load moves', () => {
    const v = windowValidity(rings, 10, undefined, undefined, undefined, loads);
    expect(v.filter((x) => x.reason !== 'valid')).toEqual([]);
  });

  it('still finds a lone drift while the load holds', () => {
    const held = rings.map((_, t) => {
      const x = ringFromChambers(cfg, fingerprint, 0.75, 550, kernel);
      x[3] += 0.5 * t;
      return x;
    });
    const v = windowValidity(held, 10, undefined, undefined, undefined, held.map(() => 0.75));
    expect(v.filter((x) => x.reason !== 'valid').map((x) => [x.thermocouple, x.reason])).toEqual([[4, 'drifting_alone']]);
  });
});
