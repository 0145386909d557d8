/**
 * Deterministic random numbers for the simulator. Everything random in a simulated ring is a
 * pure function of (seed, unit, time, index), so any time window of any unit can be generated
 * on its own and gives the same readings as a longer run that contains it. No Math.random here.
 */

/** FNV-1a hash of a string to an unsigned 32-bit integer. */
export function hashString(text: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i);
    h = Math.imul(h, 0x01000193);
  }
  return h >>> 0;
}

/** Mixes a 32-bit integer into a well-scattered 32-bit integer (xor-shift-multiply finaliser). */
export function mix32(x: number): number {
  let z = x | 0;
  z ^= z >>> 16;
  z = Math.imul(z, 0x7feb352d);
  z ^= z >>> 15;
  z = Math.imul(z, 0x846ca68b);
  z ^= z >>> 16;
  return z >>> 0;
}

/** Combines several integers (each taken modulo 2³²) into one 32-bit key. */
export function combineKeys(...parts: number[]): number {
  let h = 0x2545f491;
  for (const p of parts) {
    const lo = p >>> 0;
    const hi = Math.floor(p / 4294967296) >>> 0;
    h = mix32(h ^ lo) ^ mix32(hi + 0x9e3779b9);
  }
  return h >>> 0;
}

/**
 * A small counter-based stream: reseed it with a key, then draw. One instance can be reused for
 * every ring (reseed per ring), so the hot path allocates nothing.
 */
export class Stream {
  private state = 0;

  constructor(key = 0) {
    this.reseed(key);
  }

  reseed(key: number): this {
    this.state = mix32(key ^ 0x5bd1e995);
    return this;
  }

  /** Uniform in [0, 1). */
  next(): number {
    this.state = (this.state + 0x9e3779b9) | 0;
    return mix32(this.state) / 4294967296;
  }

  /** Uniform in [lo, hi). */
  uniform(lo: number, hi: number): number {
    return lo + (hi - lo) * this.next();
  }

  /** Integer in [lo, hi] inclusive. */
  int(lo: number, hi: number): number {
    return lo + Math.floor(this.next() * (hi - lo + 1));
  }

  /**
   * Approximately normal, unit variance, bounded to ±2√3 (sum of four uniforms). The bound is
   * what lets a sensor stay inside its tolerance class by construction.
   */
  bounded(): number {
    return (this.next() + this.next() + this.next() + this.next() - 2) * 1.7320508075688772;
  }

  /** Standard normal (Box–Muller, one value per call). */
  normal(): number {
    const u = 1 - this.next();
    const v = this.next();
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  }

  /** True with probability p. */
  chance(p: number): boolean {
    return this.next() < p;
  }
}

/** A normal value clipped to ±limit·σ, from a stream. */
export function clippedNormal(s: Stream, sigma: number, limitSigmas: number): number {
  const z = s.normal();
  return sigma * Math.max(-limitSigmas, Math.min(limitSigmas, z));
}
