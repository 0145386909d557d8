/** Shared helpers for the core tests: a seeded PRNG, normal deviates, unit configurations. */
import type { SwirlPoint, UnitConfig } from '../../services/core/index.ts';

/** mulberry32: a small seeded PRNG returning uniforms in [0, 1). */
export function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Standard normal deviates by the Box–Muller transform. */
export function normalSource(uniform: () => number): () => number {
  let spare = NaN;
  return () => {
    if (spare === spare) {
      const s = spare;
      spare = NaN;
      return s;
    }
    let u = 0;
    while (u === 0) u = uniform();
    const v = uniform();
    const r = Math.sqrt(-2 * Math.log(u));
    spare = r * Math.sin(2 * Math.PI * v);
    return r * Math.cos(2 * Math.PI * v);
  };
}

export const demoCurve: SwirlPoint[] = [
  [0.3, 92],
  [0.6, 74],
  [1.0, 55],
];

/** The demo unit shape: 18 thermocouples, 10 chambers. */
export function demoConfig(overrides: Partial<UnitConfig> = {}): UnitConfig {
  return {
    ratedPowerMw: 24,
    thermocouples: { count: 18, firstAngleDeg: 10 },
    chambers: { count: 10, firstAngleDeg: 0 },
    swirl: { sense: 1, curve: demoCurve },
    temperatureUnit: 'C',
    ...overrides,
  };
}

/** A unit with n chambers and perChamber thermocouples per chamber. */
export function unitConfig(n: number, perChamber: number, tcFirstDeg: number, chamberFirstDeg: number, sense: 1 | -1, curve: SwirlPoint[]): UnitConfig {
  return {
    ratedPowerMw: 100,
    thermocouples: { count: n * perChamber, firstAngleDeg: tcFirstDeg },
    chambers: { count: n, firstAngleDeg: chamberFirstDeg },
    swirl: { sense, curve },
    temperatureUnit: 'C',
  };
}

/** Path of the shared reference folder, from this file's location. */
export async function referencePath(file: string): Promise<string> {
  const path = await import('node:path');
  const url = await import('node:url');
  return path.resolve(path.dirname(url.fileURLToPath(import.meta.url)), '../../../shared/reference', file);
}
