/**
 * Consistency checks of a unit configuration beyond field types: angle lists that match their
 * counts, distinct thermocouple positions in ring order, a swirl curve sorted by load. Returns every problem
 * found, each naming its field, so a person can correct them all at once.
 */
import type { UnitConfig } from './types.ts';

export interface ConfigProblem {
  field: string;
  reason: string;
}

export const SWIRL_LOAD_MAX = 1.2;
/** Largest thermocouple count the analysis supports (its validity-mask key). */
export const MAX_THERMOCOUPLES = 64;

/**
 * Where an angle list (distinct angles in [0, 360)) leaves ring order: the index of the angle
 * that steps back, or 0 when the list goes once round in increasing angle. Going round once,
 * the list steps back exactly once counting the step from the last angle to the first (at 360°,
 * wherever the list starts); a second step back is the one named.
 */
export function outOfRingOrder(anglesDeg: readonly number[]): number {
  const m = anglesDeg.length;
  const back: number[] = [];
  for (let i = 1; i < m; i++) if (anglesDeg[i] < anglesDeg[i - 1]) back.push(i);
  const wraps = m > 1 && anglesDeg[0] < anglesDeg[m - 1] ? 1 : 0;
  if (back.length + wraps <= 1) return 0;
  return back.length >= 2 ? back[1] : back[0];
}

export function checkUnitConfig(c: UnitConfig): ConfigProblem[] {
  const problems: ConfigProblem[] = [];
  const tc = c.thermocouples;
  if (!Number.isInteger(tc?.count) || tc.count < 1 || tc.count > MAX_THERMOCOUPLES) {
    problems.push({ field: 'thermocouples.count', reason: `must be a whole number from 1 to ${MAX_THERMOCOUPLES}; got ${tc?.count}` });
  }
  if (!Number.isInteger(c.chambers?.count) || c.chambers.count < 1) {
    problems.push({ field: 'chambers.count', reason: `must be a positive whole number; got ${c.chambers?.count}` });
  }
  if (!Number.isFinite(c.chambers?.firstAngleDeg)) problems.push({ field: 'chambers.firstAngleDeg', reason: 'must be a finite number of degrees' });
  if (problems.length) return problems;
  if (tc.anglesDeg !== undefined && tc.firstAngleDeg !== undefined) {
    problems.push({ field: 'thermocouples', reason: 'give either firstAngleDeg or anglesDeg, not both' });
  }
  if (tc.anglesDeg !== undefined) {
    if (tc.anglesDeg.length !== tc.count) {
      problems.push({ field: 'thermocouples.anglesDeg', reason: `has ${tc.anglesDeg.length} angles but count is ${tc.count}` });
    }
    const seen = new Set<number>();
    tc.anglesDeg.forEach((a, i) => {
      if (!Number.isFinite(a)) problems.push({ field: `thermocouples.anglesDeg.${i}`, reason: 'must be a finite number of degrees' });
      else if (!(a >= 0 && a < 360)) problems.push({ field: `thermocouples.anglesDeg.${i}`, reason: `${a} is outside 0 ≤ angle < 360` });
      if (seen.has(a)) problems.push({ field: `thermocouples.anglesDeg.${i}`, reason: `${a}° is given twice` });
      seen.add(a);
    });
    if (!problems.length) {
      const out = outOfRingOrder(tc.anglesDeg);
      if (out > 0) {
        problems.push({
          field: `thermocouples.anglesDeg.${out}`,
          reason: `${tc.anglesDeg[out]}° comes after ${tc.anglesDeg[out - 1]}°: the angles must increase round the ring in thermocouple order (each thermocouple further round than the one before, in the direction the angles are read; the list may pass 360° once, e.g. [350, 10, 30, …]), because a thermocouple's neighbours are found by its number`,
        });
      }
    }
  }
  const curve = c.swirl?.curve;
  if (!Array.isArray(curve)) {
    problems.push({ field: 'swirl.curve', reason: 'needs at least one [load, degrees] point' });
    return problems;
  }
  if (curve.length === 0) problems.push({ field: 'swirl.curve', reason: 'needs at least one [load, degrees] point' });
  curve.forEach(([load, deg], i) => {
    if (!(load >= 0 && load <= SWIRL_LOAD_MAX)) problems.push({ field: `swirl.curve.${i}`, reason: `load ${load} is outside 0…${SWIRL_LOAD_MAX}` });
    if (!Number.isFinite(load)) problems.push({ field: `swirl.curve.${i}`, reason: 'load is not a number' });
    if (!Number.isFinite(deg)) problems.push({ field: `swirl.curve.${i}`, reason: 'angle is not a number' });
    if (i > 0 && !(load > curve[i - 1][0])) problems.push({ field: `swirl.curve.${i}`, reason: 'loads must be strictly increasing' });
  });
  if (c.swirl.sense !== 1 && c.swirl.sense !== -1) problems.push({ field: 'swirl.sense', reason: 'must be 1 or -1' });
  return problems;
}
