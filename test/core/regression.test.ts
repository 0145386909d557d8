import { describe, expect, it } from 'vitest';
import { driftRate, SECONDS_PER_DAY } from '../../services/core/drift.ts';
import { linearRegression, slopeConfidenceInterval } from '../../services/core/regression.ts';
import { referenceText } from '../helpers/reference.ts';

async function norris(): Promise<{ x: number[]; y: number[] }> {
  const text = referenceText('norris.csv').trim().split(/\r?\n/);
  const header = text[0].split(',').map((h) => h.trim().toLowerCase());
  const xi = header.indexOf('x');
  const yi = header.indexOf('y');
  const rows = text.slice(1).map((l) => l.split(',').map(Number));
  return { x: rows.map((r) => r[xi]), y: rows.map((r) => r[yi]) };
}

function relErr(a: number, b: number): number {
  return Math.abs(a - b) / Math.abs(b);
}

describe('ordinary least squares against NIST StRD "Norris" (certified values)', () => {
  // Source: NIST Statistical Reference Datasets, linear regression, Norris; the certified values as NIST publishes them.
  it('reproduces coefficients, standard errors, residual SD, R² and RSS to 9 significant digits', async () => {
    const { x, y } = await norris();
    expect(x.length).toBe(36);
    const fit = linearRegression(x, y);
    expect(relErr(fit.intercept, -0.262323073774029)).toBeLessThan(1e-9);
    expect(relErr(fit.slope, 1.00211681802045)).toBeLessThan(1e-9);
    expect(relErr(fit.interceptSe, 0.232818234301152)).toBeLessThan(1e-9);
    expect(relErr(fit.slopeSe, 4.29796848199937e-4)).toBeLessThan(1e-9);
    expect(relErr(fit.residualSd, 0.884796396144373)).toBeLessThan(1e-9);
    expect(relErr(fit.rSquared, 0.999993745883712)).toBeLessThan(1e-12);
    expect(relErr(fit.residualSumOfSquares, 26.6173985294224)).toBeLessThan(1e-9);
    expect(fit.degreesOfFreedom).toBe(34);
  });

  it('gives the same slope through the drift-rate path (x read as days)', async () => {
    const { x, y } = await norris();
    const d = driftRate(x.map((v) => v * SECONDS_PER_DAY), y, undefined, { interval: 'ols' });
    expect(relErr(d.per30DaysDegC, 30 * 1.00211681802045)).toBeLessThan(1e-9);
    // t(0.975, 34) = 2.0322445 (standard t table value, from memory)
    const half = 2.0322445 * 4.29796848199937e-4 * 30;
    expect(d.per30DaysInterval[0]).toBeCloseTo(30 * 1.00211681802045 - half, 6);
    expect(d.per30DaysInterval[1]).toBeCloseTo(30 * 1.00211681802045 + half, 6);
    expect(d.significant).toBe(true);
  });

  it('slope interval widens with lower confidence levels reversed (90 % inside 99 %)', async () => {
    const { x, y } = await norris();
    const fit = linearRegression(x, y);
    const c90 = slopeConfidenceInterval(fit, 0.9);
    const c99 = slopeConfidenceInterval(fit, 0.99);
    expect(c99[0]).toBeLessThan(c90[0]);
    expect(c99[1]).toBeGreaterThan(c90[1]);
  });

  it('returns NaN coefficients with fewer than two points or no spread in x', () => {
    expect(linearRegression([1], [2]).slope).toBeNaN();
    expect(linearRegression([1, 1, 1], [2, 3, 4]).slope).toBeNaN();
    expect(linearRegression([0, 1, NaN, 2], [0, 1, 5, 2]).slope).toBeCloseTo(1, 12);
  });
});
