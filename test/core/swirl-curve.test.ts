/**
 * Swirl curves that cross 0°/360°, and the swirl calibration's curve: interpolated the shorter
 * way round, fitted from simulated rings whose true swirl crosses 360° into a curve a unit's
 * configuration accepts, and with knots that no data support following their neighbours.
 */
import { describe, expect, it } from 'vitest';
import { analyseRing, arcDistanceDeg, calibrateSwirl, correctedLoadFraction, fitPiecewiseLinear, prepareUnit, swirlDeg, type CalibrationSample, type SwirlPoint } from '../../services/core/index.ts';
import { assertConsistent, unitFromBody, validateUnitBody } from '../../services/api/unit-body.ts';
import { DEMO_SITES, HARBOUR_POINT_TYPE } from '../../services/sim/fleet.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import type { SimUnit } from '../../services/sim/types.ts';

/** The configured curve: 35° at 30 % load turning to 330° at full load, through 0°. */
const CROSSING: SwirlPoint[] = [[0.3, 35], [1.0, 330]];
/** The same curve written without the wrap (the simulator's truth): 395° → 330°. */
const UNWRAPPED: SwirlPoint[] = [[0.3, 395], [1.0, 330]];

describe('a swirl curve crossing 0°/360°', () => {
  it('is interpolated the shorter way round (values worked by hand)', () => {
    // 35° → 330° is −65° the short way: at 65 % load, half-way, 35 − 32.5 = 2.5°; at 1.0 − 0.7/13
    // (12/13 of the way), 35 − 60 = −25° ≡ 335°. The long way (+295°) would give 182.5° half-way,
    // the opposite side of the ring.
    expect(swirlDeg(CROSSING, 0.65)).toBeCloseTo(2.5, 9);
    expect(swirlDeg(CROSSING, 1.0 - 0.7 / 13)).toBeCloseTo(335, 9);
    expect(swirlDeg(CROSSING, 0.3)).toBe(35);
    expect(swirlDeg(CROSSING, 1.0)).toBe(330);
    expect(swirlDeg([[0.3, 350], [1.0, 20]], 0.65)).toBeCloseTo(5, 9);
    // A curve that does not cross is unchanged: [[0.3, 92], [1.0, 55]] at 65 % → 73.5 (API.md example).
    expect(swirlDeg([[0.3, 92], [1.0, 55]], 0.65)).toBeCloseTo(73.5, 9);
  });
});

/** A Harbour Point type unit, cycling between night and day load, chamber 4 cut to 60 % of its fuel. */
function coldChamberUnit(configured: SwirlPoint[]): SimUnit {
  return {
    config: { id: 'swirl-x', name: 'Swirl test unit', site: 'Harbour Point', ...HARBOUR_POINT_TYPE, swirl: { sense: 1, curve: configured } },
    climate: DEMO_SITES['Harbour Point'],
    physics: { trueSwirl: { sense: 1, curve: UNWRAPPED } },
    dispatch: { profile: 'cycling', nightLoad: 0.6, tripsPerYear: 0 },
    faults: [{ kind: 'nozzle_plugging', chamber: 4, at: '2026-01-01T00:00:00Z', days: 0, depthPct: 40 }],
  };
}

function loadedRings(unit: SimUnit): CalibrationSample[] {
  const out: CalibrationSample[] = [];
  for (const r of simulateUnit(unit, { from: '2026-01-05T00:00:00Z', to: '2026-01-08T00:00:00Z', seed: 7, steadyIntervalS: 300 }).rings()) {
    if (Math.abs(r.speedPct - 100) > 1 || r.loadMw <= 0) continue;
    const l = correctedLoadFraction(r.loadMw, r.ambientC, r.ambientKPa, unit.config);
    if (l >= 0.3) out.push({ loadFraction: l, readingsDegC: r.exhaustC });
  }
  return out;
}

describe('simulated rings whose true swirl crosses 360°', () => {
  it('map the cold plume to its chamber at part load with the crossing curve configured', () => {
    const unit = coldChamberUnit(CROSSING);
    const ctx = prepareUnit(unit.config);
    const part = loadedRings(unit).filter((s) => s.loadFraction > 0.5 && s.loadFraction < 0.75);
    expect(part.length).toBeGreaterThan(50);
    let right = 0;
    for (const s of part) if (analyseRing(ctx, s.readingsDegC, s.loadFraction).worstChamber === 4) right++;
    expect(right / part.length).toBeGreaterThan(0.95);
  });

  it('calibrate to a curve that PATCH accepts and that follows the true swirl', () => {
    const unit = coldChamberUnit([[0.5, 0]]);
    const samples = loadedRings(unit);
    const cal = calibrateSwirl(unit.config, 4, samples);
    expect(cal.points.length).toBeGreaterThan(200);
    expect(cal.rmsResidualDeg).toBeLessThan(3);
    for (const [l, d] of cal.curve) {
      expect(d).toBeGreaterThanOrEqual(-360);
      expect(d).toBeLessThanOrEqual(360);
      // Against the simulator's truth (its own curve, 395° → 330°), modulo a turn, within a sixth
      // of the 32.7° chamber pitch (the simulated ring's placement asymmetry and probe offsets
      // move the located plume by a few degrees).
      expect(arcDistanceDeg(d, swirlDeg(UNWRAPPED, l))).toBeLessThan(360 / 11 / 6);
    }
    // The curve as the calibration route returns it (rounded) passes the units schema and the
    // consistency checks of PATCH /v1/units/:unitId.
    const curve = cal.curve.map(([l, d]) => [Math.round(l * 1000) / 1000, Math.round(d * 10) / 10] as [number, number]);
    const body = validateUnitBody({ id: 'swirl-x', name: 'n', site: 's', ...HARBOUR_POINT_TYPE, swirl: { sense: 1, curve } });
    const { config } = unitFromBody(body);
    expect(() => assertConsistent(config)).not.toThrow();
  });
});

describe('the piecewise-linear swirl fit', () => {
  it('gives a knot without data its neighbours\' line, not 0°', () => {
    // Data only at 30–40 % and 90–100 % load, on ψ = 100 − 50·L (so 80° at 40 %, 55° at 90 %);
    // knots at 60 % and 70 % have no data under their hat functions. On the line between the
    // nearest supported knots they are 100 − 50·0.6 = 70° and 65° (worked by hand).
    const x: number[] = [];
    const y: number[] = [];
    for (let i = 0; i <= 20; i++) {
      for (const l of [0.3 + 0.005 * i, 0.9 + 0.005 * i]) {
        x.push(l);
        y.push(100 - 50 * l);
      }
    }
    const fit = fitPiecewiseLinear(x, y, [0.3, 0.4, 0.6, 0.7, 0.9, 1.0]);
    const at = new Map(fit.curve.map(([l, d]) => [l, d]));
    expect(at.get(0.6)).toBeCloseTo(70, 1);
    expect(at.get(0.7)).toBeCloseTo(65, 1);
    for (const l of [0.3, 0.4, 0.9, 1.0]) expect(at.get(l)).toBeCloseTo(100 - 50 * l, 2);
    // An end knot beyond the data holds the nearest supported knot's value.
    const end = fitPiecewiseLinear(x.filter((l) => l < 0.5), y.filter((_, i) => x[i] < 0.5), [0.3, 0.4, 0.8]);
    expect(end.curve[2][1]).toBeCloseTo(80, 1);
  });
});
