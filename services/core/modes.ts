/**
 * Combustion modes. A site may send with each ring the short code of the combustion mode the
 * unit runs in; the ring pattern differs from mode to mode (another fuel split, other burners
 * lit), so each mode has its normal. Pure: samples and codes in, baselines and verdicts out.
 *
 * - A baseline fit also fits one baseline per mode from that mode's steady samples, kept inside
 *   the unit's all-mode baseline (`modes`); a mode whose fullest load bin holds fewer than the
 *   minimum count of samples gets none (a thin mode) and is judged on the all-mode baseline,
 *   with a caution.
 * - A change of mode is a transient: the rings of the transfer (the steady-state window after
 *   the change) are not steady, and findings are held (not evaluated) through it.
 */
import { fitUnitBaseline, type BaselineMeta, type BaselineOptions, type BaselineSample, type UnitBaseline } from './baseline.ts';

/** A unit baseline with the baselines of its modes (mode code → baseline), when it has any. */
export type ModalBaseline = UnitBaseline & { modes?: Record<string, UnitBaseline> };

/** Fullest load bin of a baseline's spread fit: the count the minimum applies to. */
function fullestBin(b: UnitBaseline): number {
  return Math.max(0, ...b.spread.bins.map((x) => x.count));
}

/**
 * The all-mode baseline of the samples, with one baseline per mode that has enough samples in
 * some load bin (options.minCount). Samples without a mode enter the all-mode fit only. A unit
 * whose samples carry no mode gets exactly fitUnitBaseline's baseline.
 */
export function fitModalBaseline(samples: readonly (BaselineSample & { mode?: string | null })[], meta: BaselineMeta, options: BaselineOptions): ModalBaseline {
  const all: ModalBaseline = fitUnitBaseline(samples, meta, options);
  const byMode = new Map<string, BaselineSample[]>();
  for (const s of samples) {
    if (!s.mode) continue;
    let list = byMode.get(s.mode);
    if (!list) byMode.set(s.mode, (list = []));
    list.push(s);
  }
  if (byMode.size === 0) return all;
  const modes: Record<string, UnitBaseline> = {};
  for (const [mode, list] of [...byMode].sort(([a], [b]) => (a < b ? -1 : 1))) {
    const fit = fitUnitBaseline(list, meta, options);
    if (fullestBin(fit) >= options.minCount) modes[mode] = fit;
  }
  return { ...all, modes };
}

/** The baseline that judges a ring of `mode`, and the caution when a mode falls back to the all-mode one. */
export function baselineForMode(b: ModalBaseline | null, mode: string | null): { baseline: UnitBaseline | null; caution: string | null } {
  if (b === null || mode === null) return { baseline: b, caution: null };
  const own = b.modes?.[mode];
  if (own) return { baseline: own, caution: null };
  return {
    baseline: b,
    caution: `Mode ${mode} had too few steady rings in baseline version ${b.version}'s window for a baseline of its own: its rings are judged on the unit's all-mode baseline, whose normal is a mixture of the modes.`,
  };
}

/**
 * Follows the mode ring by ring: a change of mode starts a transfer lasting transferMs of ring
 * time (the steady-state window). A ring without a mode after rings with one is not a change
 * (a site may leave it out now and then).
 */
export class ModeTracker {
  private last: string | null = null;
  private changedAtMs = -Infinity;

  constructor(private readonly transferMs: number) {}

  /** Takes the ring's mode; true while the ring is inside a transfer. */
  push(tsMs: number, mode: string | null): boolean {
    if (mode !== null) {
      if (this.last !== null && mode !== this.last) this.changedAtMs = tsMs;
      this.last = mode;
    }
    return tsMs - this.changedAtMs < this.transferMs;
  }

  get mode(): string | null {
    return this.last;
  }
}
