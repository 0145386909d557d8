import { describe, expect, it } from 'vitest';
import {
  celsiusToFahrenheit,
  fahrenheitToCelsius,
  typeKCompensatedC,
  typeKEmfMv,
  typeKMeasuredMv,
  typeKTemperatureC,
  typeKToleranceC,
} from '../../services/core/temperature.ts';

describe('Type K thermocouple (NIST ITS-90 reference functions, NIST Monograph 175)', () => {
  // Source: NIST ITS-90 Type K table values, as listed in shared/reference/README.md.
  const table: [number, number][] = [
    [100, 4.096],
    [500, 20.644],
    [600, 24.905],
    [800, 33.275],
    [1000, 41.276],
    [1372, 54.886],
  ];
  it.each(table)('E(%d °C) matches the NIST table value %f mV to the table resolution', (t, mv) => {
    expect(Math.abs(typeKEmfMv(t) - mv)).toBeLessThanOrEqual(0.0005 + 1e-9);
  });

  it('inverts within the NIST stated error band of −0.05/+0.06 °C from 0 to 1372 °C', () => {
    let worstLow = 0;
    let worstHigh = 0;
    for (let t = 0; t <= 1372; t += 0.5) {
      const err = typeKTemperatureC(typeKEmfMv(t)) - t;
      worstLow = Math.min(worstLow, err);
      worstHigh = Math.max(worstHigh, err);
    }
    expect(worstLow).toBeGreaterThanOrEqual(-0.05);
    expect(worstHigh).toBeLessThanOrEqual(0.06);
  });

  it('is continuous at 0 °C between the sub-zero and the 0–1372 °C functions', () => {
    expect(Math.abs(typeKEmfMv(-1e-9) - typeKEmfMv(0))).toBeLessThan(1e-3);
    expect(typeKTemperatureC(typeKEmfMv(-100))).toBeCloseTo(-100, 0);
  });

  it('compensates the cold junction: a 550 °C junction read against a 25 °C terminal block', () => {
    const mv = typeKMeasuredMv(550, 25);
    expect(mv).toBeLessThan(typeKEmfMv(550));
    expect(typeKCompensatedC(mv, 25)).toBeCloseTo(550, 1);
  });

  it('gives NaN outside the functions range instead of a wrong number', () => {
    expect(typeKEmfMv(1500)).toBeNaN();
    expect(typeKTemperatureC(60)).toBeNaN();
    expect(typeKTemperatureC(Number.NaN)).toBeNaN();
  });
});

describe('Type K tolerance classes (IEC 60584-1)', () => {
  // Source: IEC 60584-1 class 1 ±1.5 °C or ±0.004·|t|, class 2 ±2.5 °C or ±0.0075·|t| (shared/reference/README.md).
  it('class 1 at 800 °C is ±3.2 °C', () => expect(typeKToleranceC(800, 1)).toBeCloseTo(3.2, 10));
  it('class 2 at 300 °C is ±2.5 °C', () => expect(typeKToleranceC(300, 2)).toBeCloseTo(2.5, 10));
  it('class 2 at 800 °C is ±6.0 °C', () => expect(typeKToleranceC(800, 2)).toBeCloseTo(6.0, 10));
  it('class 1 at low temperature is the fixed ±1.5 °C', () => expect(typeKToleranceC(100, 1)).toBe(1.5));
});

describe('Fahrenheit', () => {
  it('converts both ways (water boils at 212 °F = 100 °C)', () => {
    expect(fahrenheitToCelsius(212)).toBeCloseTo(100, 12);
    expect(celsiusToFahrenheit(100)).toBeCloseTo(212, 12);
    expect(fahrenheitToCelsius(celsiusToFahrenheit(537.3))).toBeCloseTo(537.3, 10);
  });
});
