import { describe, expect, it } from 'vitest';
import {
  correctedFlow,
  correctedFuelFlow,
  correctedLoadFraction,
  correctedPowerMw,
  correctedSpeed,
  correctedTemperatureC,
  deltaFromAmbientKPa,
  steadyState,
  thetaFromAmbientC,
} from '../../services/core/correction.ts';

describe('corrected parameters (similarity groups, ISO 3977-2 standard day)', () => {
  // Source: arithmetic worked by hand (30 °C, 99.0 kPa).
  const theta = thetaFromAmbientC(30);
  const delta = deltaFromAmbientKPa(99.0);
  it('θ = 1.052056 and δ = 0.977054 at 30 °C, 99.0 kPa', () => {
    expect(theta).toBeCloseTo(1.052056, 6);
    expect(delta).toBeCloseTo(0.977054, 6);
  });
  it('100 MW corrects to 99.784 MW', () => expect(correctedPowerMw(100, theta, delta)).toBeCloseTo(99.784, 3));
  it('3000 rpm corrects to 2924.84 rpm', () => expect(correctedSpeed(3000, theta)).toBeCloseTo(2924.84, 2));
  it('400 kg/s corrects to 419.915 kg/s', () => expect(correctedFlow(400, theta, delta)).toBeCloseTo(419.915, 3));
  it('fuel flow uses the power group and temperature divides absolute temperature by θ', () => {
    expect(correctedFuelFlow(10, theta, delta)).toBeCloseTo(correctedPowerMw(10, theta, delta), 12);
    expect(correctedTemperatureC(15, 1)).toBeCloseTo(15, 12);
    expect(correctedTemperatureC(550, theta)).toBeCloseTo((550 + 273.15) / theta - 273.15, 10);
  });
  it('is the identity on the ISO standard day', () => {
    expect(correctedLoadFraction(80, 15, 101.325, { ratedPowerMw: 100 })).toBeCloseTo(0.8, 12);
  });
  it('uses configured exponents', () => {
    const cfg = { ratedPowerMw: 100, correction: { deltaExponent: 1, thetaExponent: 1 } };
    expect(correctedLoadFraction(100, 30, 99.0, cfg)).toBeCloseTo(100 / (delta * theta) / 100, 10);
  });
  it('returns NaN for impossible inputs rather than a number', () => {
    expect(correctedLoadFraction(100, 30, 0, { ratedPowerMw: 100 })).toBeNaN();
    expect(correctedLoadFraction(100, 30, 99, { ratedPowerMw: 0 })).toBeNaN();
  });
});

describe('steady state', () => {
  const times = Array.from({ length: 11 }, (_, i) => i * 60);
  it('is steady at synchronous speed with flat load', () => {
    const r = steadyState(100, times, times.map(() => 0.8), 600);
    expect(r).toMatchObject({ steady: true, reason: 'steady' });
  });
  it('is not steady while the load ramps faster than the limit', () => {
    const r = steadyState(100, times, times.map((t) => 0.5 + t / 6000), 600);
    expect(r.steady).toBe(false);
    expect(r.reason).toBe('load_changing');
    expect(r.loadRatePerMin).toBeCloseTo(0.01, 6);
  });
  it('is not steady off synchronous speed', () => {
    expect(steadyState(95, times, times.map(() => 0.8), 600).reason).toBe('speed_off_synchronous');
  });
  it('needs samples covering the window', () => {
    expect(steadyState(100, [590, 600], [0.8, 0.8], 600).reason).toBe('too_few_samples');
  });
  it('ignores samples after the evaluation time', () => {
    const r = steadyState(100, [...times, 660], [...times.map(() => 0.8), 0.2], 600);
    expect(r.steady).toBe(true);
  });
});
