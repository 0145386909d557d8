/** Small helpers shared by the simulator tests. */
export { plumeByHandDeg } from '../core/helpers.ts';

export function mean(xs: ArrayLike<number>): number {
  let s = 0, n = 0;
  for (let i = 0; i < xs.length; i++) if (!Number.isNaN(xs[i])) { s += xs[i]; n++; }
  return s / n;
}

export function std(xs: ArrayLike<number>): number {
  const m = mean(xs);
  let s = 0, n = 0;
  for (let i = 0; i < xs.length; i++) if (!Number.isNaN(xs[i])) { s += (xs[i] - m) ** 2; n++; }
  return Math.sqrt(s / (n - 1));
}

/**
 * Angle (degrees) of the centre of a cold plume in a deviation profile: circular mean of the
 * angles weighted by how far each reading lies below the profile's median.
 */
export function coldCentreDeg(anglesDeg: ArrayLike<number>, deviation: ArrayLike<number>): number {
  const sorted = Array.from(deviation).sort((a, b) => a - b);
  const med = sorted[Math.floor(sorted.length / 2)];
  let sx = 0, sy = 0;
  for (let i = 0; i < anglesDeg.length; i++) {
    const w = Math.max(0, med - deviation[i]);
    const a = (anglesDeg[i] * Math.PI) / 180;
    sx += w * Math.cos(a);
    sy += w * Math.sin(a);
  }
  const deg = (Math.atan2(sy, sx) * 180) / Math.PI;
  return ((deg % 360) + 360) % 360;
}

export function arcDeg(a: number, b: number): number {
  const d = (((a - b) % 360) + 360) % 360;
  return Math.min(d, 360 - d);
}
