/**
 * Geometry of the exhaust ring: where each thermocouple and each chamber sits, circular
 * arithmetic on angles in degrees, and neighbours. Pure functions, no I/O.
 */
import type { UnitConfig } from './types.ts';

/** Wraps any angle into [0, 360) degrees. */
export function wrapDeg(angleDeg: number): number {
  const r = angleDeg % 360;
  const w = r < 0 ? r + 360 : r;
  return w === 360 ? 0 : w;
}

/** Signed shortest arc from a to b, in (-180, 180] degrees. */
export function signedArcDeg(fromDeg: number, toDeg: number): number {
  const d = wrapDeg(toDeg - fromDeg);
  return d > 180 ? d - 360 : d;
}

/** Length of the shorter arc between two angles, in [0, 180] degrees. */
export function arcDistanceDeg(aDeg: number, bDeg: number): number {
  return Math.abs(signedArcDeg(aDeg, bDeg));
}

/** Angle of every thermocouple, index 0 = thermocouple 1. */
export function thermocoupleAnglesDeg(config: Pick<UnitConfig, 'thermocouples'>): Float64Array {
  const tc = config.thermocouples;
  const out = new Float64Array(tc.count);
  if (tc.anglesDeg && tc.anglesDeg.length > 0) {
    for (let i = 0; i < tc.count; i++) out[i] = wrapDeg(tc.anglesDeg[i]);
  } else {
    const pitch = 360 / tc.count;
    const first = tc.firstAngleDeg ?? 0;
    for (let i = 0; i < tc.count; i++) out[i] = wrapDeg(first + i * pitch);
  }
  return out;
}

/** Angle of every chamber, index 0 = chamber 1: φₖ = φ₀ + k·360/N. */
export function chamberAnglesDeg(config: Pick<UnitConfig, 'chambers'>): Float64Array {
  const n = config.chambers.count;
  const out = new Float64Array(n);
  const pitch = 360 / n;
  for (let k = 0; k < n; k++) out[k] = wrapDeg(config.chambers.firstAngleDeg + k * pitch);
  return out;
}

/** Angular spacing of chambers, degrees. */
export function chamberPitchDeg(config: Pick<UnitConfig, 'chambers'>): number {
  return 360 / config.chambers.count;
}

/** Indices (from 0) of the two ring neighbours of index i among m positions. */
export function ringNeighbours(i: number, m: number): [number, number] {
  return [(i - 1 + m) % m, (i + 1) % m];
}

/** True when two ring positions (indices from 0) are next to each other. */
export function areAdjacent(i: number, j: number, m: number): boolean {
  if (i === j || m < 2) return false;
  const d = Math.abs(i - j);
  return d === 1 || d === m - 1;
}
