import { describe, expect, it } from 'vitest';
import { createCusum, createEwma, resetCusum, updateCusum, updateEwma, type CusumState } from '../../services/core/drift.ts';
import { mulberry32, normalSource } from './helpers.ts';

/** Mean run length to the first signal of a fresh CUSUM, for samples N(shift, 1). */
function cusumArl(h: number, shift: number, runs: number, seed: number): number {
  const z = normalSource(mulberry32(seed));
  const s: CusumState = createCusum(0.5, h);
  let total = 0;
  for (let r = 0; r < runs; r++) {
    resetCusum(s);
    let n = 0;
    for (;;) {
      n++;
      if (updateCusum(s, shift + z()) !== null) break;
    }
    total += n;
  }
  return total / runs;
}

function ewmaArl(lambda: number, L: number, runs: number, seed: number): number {
  const z = normalSource(mulberry32(seed));
  let total = 0;
  for (let r = 0; r < runs; r++) {
    const s = createEwma(lambda, L);
    let n = 0;
    for (;;) {
      n++;
      if (updateEwma(s, z()) !== null) break;
    }
    total += n;
  }
  return total / runs;
}

describe('two-sided tabular CUSUM, k = 0.5 (Montgomery, Introduction to Statistical Quality Control)', () => {
  // Source: ARL table for the tabular CUSUM with k = 1/2 (D. C. Montgomery, Introduction to Statistical Quality Control).
  // Run lengths are close to geometric, so the standard error of the mean is about ARL/√runs;
  // tolerances are about three standard errors.
  it('h = 4: in-control ARL ≈ 168 (±6 %)', () => {
    const arl = cusumArl(4, 0, 4000, 11);
    expect(Math.abs(arl / 168 - 1)).toBeLessThan(0.06);
  });
  it('h = 4: ARL ≈ 8.38 at a 1σ shift (±4 %)', () => {
    expect(Math.abs(cusumArl(4, 1, 4000, 12) / 8.38 - 1)).toBeLessThan(0.04);
  });
  it('h = 5: in-control ARL ≈ 465 (±6 %)', () => {
    expect(Math.abs(cusumArl(5, 0, 4000, 13) / 465 - 1)).toBeLessThan(0.06);
  });
  it('h = 5: ARL ≈ 10.4 at 1σ and 4.01 at 2σ (±4 %)', () => {
    expect(Math.abs(cusumArl(5, 1, 4000, 14) / 10.4 - 1)).toBeLessThan(0.04);
    expect(Math.abs(cusumArl(5, 2, 4000, 15) / 4.01 - 1)).toBeLessThan(0.04);
  });
  it('signals downwards for a negative shift and is plain JSON that resumes where it stopped', () => {
    const s = createCusum(0.5, 4);
    const z = normalSource(mulberry32(5));
    for (let i = 0; i < 3; i++) updateCusum(s, -1.5 + z());
    const resumed = JSON.parse(JSON.stringify(s)) as CusumState;
    let sig = null;
    for (let i = 0; i < 50 && sig === null; i++) sig = updateCusum(resumed, -1.5 + z());
    expect(sig).toBe('down');
  });
});

describe('EWMA (Lucas & Saccucci 1990)', () => {
  // Source: λ = 0.1, L = 2.814 gives in-control ARL ≈ 500 (published EWMA ARL tables, Lucas and Saccucci 1990; the value from memory).
  it('λ = 0.1, L = 2.814: in-control ARL ≈ 500 (±6 %)', () => {
    expect(Math.abs(ewmaArl(0.1, 2.814, 4000, 21) / 500 - 1)).toBeLessThan(0.06);
  });
  it('detects a 1σ shift far sooner than in control', () => {
    const z = normalSource(mulberry32(22));
    const s = createEwma(0.1, 2.814);
    let n = 0;
    while (updateEwma(s, 1 + z()) === null) n++;
    expect(n).toBeLessThan(60);
  });
});
