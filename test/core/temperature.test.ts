import { describe, expect, it } from 'vitest';
import {
  celsiusToFahrenheit,
  fahrenheitToCelsius,
  typeKCompensatedC,
  typeKEmfMv,
  typeKMeasuredMv,
  typeKTemperatureC,
  typeKToleranceC,
  TYPE_K_CLASS_RANGE_C,
} from '../../services/core/temperature.ts';

describe('Type K thermocouple (NIST ITS-90 reference functions, NIST Monograph 175)', () => {
  // Source: NIST ITS-90 Type K table values.
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

  // Source: NIST ITS-90 Type K table (NIST Monograph 175), below 0 °C (values from memory).
  const below: [number, number][] = [
    [-50, -1.889],
    [-100, -3.554],
    [-200, -5.891],
  ];
  it.each(below)('below 0 °C, E(%d °C) matches the NIST table value %f mV to the table resolution', (t, mv) => {
    expect(Math.abs(typeKEmfMv(t) - mv)).toBeLessThanOrEqual(0.0005 + 1e-9);
  });

  it.each(below)('below 0 °C, the inverse gives %d °C for the NIST table EMF within the stated −0.02/+0.04 °C plus the table rounding', (t, mv) => {
    // Stated error of the −200–0 °C inverse, NIST Monograph 175 (from memory); the table's
    // ±0.0005 mV rounding is up to 0.031 °C more where the sensitivity falls to about
    // 16 µV/°C, at −200 °C (table: E(−190 °C) = −5.730 mV, from memory; 0.0005 / 0.0161).
    expect(Math.abs(typeKTemperatureC(mv) - t)).toBeLessThanOrEqual(0.04 + 0.031);
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
  // Source: IEC 60584-1, Type K: class 1 ±1.5 °C from −40 to 375 °C and ±0.004·|t| from 375 to
  // 1000 °C; class 2 ±2.5 °C from −40 to 333 °C and ±0.0075·|t| from 333 to 1200 °C (from memory).
  it('class 1 at 800 °C is ±3.2 °C', () => expect(typeKToleranceC(800, 1)).toBeCloseTo(3.2, 10));
  it('class 2 at 300 °C is ±2.5 °C', () => expect(typeKToleranceC(300, 2)).toBeCloseTo(2.5, 10));
  it('class 2 at 800 °C is ±6.0 °C', () => expect(typeKToleranceC(800, 2)).toBeCloseTo(6.0, 10));
  it('class 1 at low temperature is the fixed ±1.5 °C', () => expect(typeKToleranceC(100, 1)).toBe(1.5));

  it('changes from the fixed to the proportional part where the standard splits its table: 375 °C (class 1), 333 °C (class 2)', () => {
    expect(typeKToleranceC(370, 1)).toBe(1.5);
    expect(typeKToleranceC(380, 1)).toBeCloseTo(1.52, 10);
    expect(typeKToleranceC(330, 2)).toBe(2.5);
    expect(typeKToleranceC(340, 2)).toBeCloseTo(2.55, 10);
  });

  it('gives each class over its range of the standard, ends included: class 1 −40 to 1000 °C, class 2 −40 to 1200 °C', () => {
    expect(TYPE_K_CLASS_RANGE_C).toEqual({ 1: [-40, 1000], 2: [-40, 1200] });
    expect(typeKToleranceC(-40, 1)).toBe(1.5);
    expect(typeKToleranceC(1000, 1)).toBeCloseTo(4.0, 10);
    expect(typeKToleranceC(-40, 2)).toBe(2.5);
    expect(typeKToleranceC(1200, 2)).toBeCloseTo(9.0, 10);
  });

  it('refuses a temperature outside the class’s range, or a class the standard does not give, saying which', () => {
    expect(() => typeKToleranceC(1001, 1)).toThrow(/no class 1 tolerance for Type K at 1001 °C: class 1 covers -40 to 1000 °C/);
    expect(() => typeKToleranceC(1250, 2)).toThrow(/no class 2 tolerance for Type K at 1250 °C: class 2 covers -40 to 1200 °C/);
    expect(() => typeKToleranceC(-41, 2)).toThrow(RangeError);
    expect(() => typeKToleranceC(Number.NaN, 2)).toThrow(/at NaN °C/);
    expect(() => typeKToleranceC(500, 3 as 1)).toThrow(/class must be 1 or 2/);
  });
});

describe('Fahrenheit', () => {
  it('converts both ways (water boils at 212 °F = 100 °C)', () => {
    expect(fahrenheitToCelsius(212)).toBeCloseTo(100, 12);
    expect(celsiusToFahrenheit(100)).toBeCloseTo(212, 12);
    expect(fahrenheitToCelsius(celsiusToFahrenheit(537.3))).toBeCloseTo(537.3, 10);
  });
});
