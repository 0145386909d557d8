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

/** A unit of the API contract's example shape: 18 thermocouples, 10 chambers, 24 MW. */
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

/**
 * Where chamber k's (from 0) plume lands, written out here rather than taken from the code under
 * test: the chamber's angle first + k·360/N, plus sense × the swirl read off the curve by
 * straight lines between its knots (held flat beyond the first and last), as DOMAIN.md defines it.
 */
export function plumeByHandDeg(firstDeg: number, count: number, k: number, sense: 1 | -1, knots: [number, number][], load: number): number {
  let psi = load <= knots[0][0] ? knots[0][1] : knots[knots.length - 1][1];
  for (let i = 1; i < knots.length; i++) {
    const [l0, s0] = knots[i - 1], [l1, s1] = knots[i];
    if (load > l0 && load <= l1) psi = s0 + ((load - l0) / (l1 - l0)) * (s1 - s0);
  }
  const a = firstDeg + (k * 360) / count + sense * psi;
  return ((a % 360) + 360) % 360;
}

/** IEC 60584-1 class 2, Type K: ±2.5 °C or ±0.0075·|t|, whichever is greater (value from memory). */
export function class2ByStandardC(tC: number): number {
  return Math.max(2.5, 0.0075 * Math.abs(tC));
}

export interface RealisticRingOptions {
  /** True plume σ as a fraction of the chamber pitch (the solver assumes 0.5). */
  widthFrac: number;
  /** Per chamber, its own fixed departure, °C (the fuel-share fingerprint as the ring sees it). */
  fingerprintDegC: ArrayLike<number>;
  /** Per thermocouple, its calibration offset as a fraction of its class-2 tolerance (|e| ≤ 1). */
  offsetFrac: ArrayLike<number>;
  /** Standard normal deviates for the reading noise. */
  normal: () => number;
  /** Reading noise, °C (default 0.35). */
  noiseSigmaC?: number;
}

/**
 * A ring as a unit that is not its model would show it, made here without the solver's kernel:
 * chamber k's departure (its deviation plus its fingerprint) lands at its plume angle
 * (plumeByHandDeg) as a wrapped Gaussian of σ = widthFrac × pitch with that departure at its
 * peak, and each thermocouple reads the gas with its class-2 offset and noise. Thermocouples
 * are evenly spaced from firstAngleDeg.
 */
export function realisticRing(config: UnitConfig, deviationDegC: ArrayLike<number>, load: number, baseDegC: number, o: RealisticRingOptions): Float64Array {
  const n = config.chambers.count, m = config.thermocouples.count;
  const sigma = (o.widthFrac * 360) / n;
  const out = new Float64Array(m);
  const plumes = Array.from({ length: n }, (_, k) => plumeByHandDeg(config.chambers.firstAngleDeg, n, k, config.swirl.sense, config.swirl.curve as [number, number][], load));
  for (let i = 0; i < m; i++) {
    const theta = (config.thermocouples.firstAngleDeg ?? 0) + (i * 360) / m;
    let gas = baseDegC;
    for (let k = 0; k < n; k++) {
      let w = 0;
      for (let j = -2; j <= 2; j++) {
        const d = ((((theta - plumes[k]) % 360) + 540) % 360) - 180 + 360 * j;
        w += Math.exp((-d * d) / (2 * sigma * sigma));
      }
      gas += (deviationDegC[k] + o.fingerprintDegC[k]) * w;
    }
    out[i] = gas + o.offsetFrac[i] * class2ByStandardC(gas) + (o.noiseSigmaC ?? 0.35) * o.normal();
  }
  return out;
}
