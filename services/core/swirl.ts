/**
 * Swirl ψ(L): the angle the flow turns between a chamber's exit and the thermocouple plane, as
 * a function of corrected load fraction L, from a unit's curve (piecewise linear, clamped at
 * the ends). Forward and inverse mapping between chambers and ring angles.
 */
import { chamberPitchDeg, signedArcDeg, wrapDeg } from './geometry.ts';
import type { SwirlPoint, UnitConfig } from './types.ts';

/**
 * ψ(L) in degrees by linear interpolation on the curve's points (sorted by load), clamped to
 * the first and last point outside the curve's range. A curve of one point is a constant.
 * Between two points the angle moves the shorter way round, so a curve may cross 0°/360°; the
 * result is then wrapped into [0, 360). Examples: curve [[0.3, 92], [1.0, 55]], L = 0.65 → 73.5;
 * curve [[0.3, 350], [1.0, 20]], L = 0.65 → 350 + 0.5·30 = 365 → 5.
 */
export function swirlDeg(curve: readonly SwirlPoint[], loadFraction: number): number {
  const n = curve.length;
  if (n === 0) return 0;
  if (!Number.isFinite(loadFraction) || loadFraction <= curve[0][0]) return curve[0][1];
  if (loadFraction >= curve[n - 1][0]) return curve[n - 1][1];
  for (let i = 1; i < n; i++) {
    const [l1, s1] = curve[i];
    if (loadFraction <= l1) {
      const [l0, s0] = curve[i - 1];
      const t = l1 === l0 ? 0 : (loadFraction - l0) / (l1 - l0);
      const d = s1 - s0;
      if (d <= 180 && d >= -180) return s0 + t * d;
      return wrapDeg(s0 + t * signedArcDeg(s0, s1));
    }
  }
  return curve[n - 1][1];
}

/** Where the plume of chamber k (from 0) lands on the ring: φₖ + s·ψ(L), wrapped. */
export function plumeAngleDeg(config: Pick<UnitConfig, 'chambers' | 'swirl'>, chamberIndex: number, loadFraction: number): number {
  const phi = config.chambers.firstAngleDeg + chamberIndex * chamberPitchDeg(config);
  return wrapDeg(phi + config.swirl.sense * swirlDeg(config.swirl.curve, loadFraction));
}

/**
 * The chamber (index from 0) whose plume lands nearest ring angle α:
 * round(wrap(α − s·ψ(L) − φ₀) / (360/N)) mod N.
 */
export function chamberBehindAngle(config: Pick<UnitConfig, 'chambers' | 'swirl'>, ringAngleDeg: number, loadFraction: number): number {
  const n = config.chambers.count;
  const back = wrapDeg(ringAngleDeg - config.swirl.sense * swirlDeg(config.swirl.curve, loadFraction) - config.chambers.firstAngleDeg);
  return Math.round(back / chamberPitchDeg(config)) % n;
}
