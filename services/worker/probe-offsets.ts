/**
 * The offsets of replaced thermocouples. A new probe of the same class may read a few degrees
 * differently (class-2 tolerance ±2.5 °C or 0.75 % of reading): after a thermocouple replaced
 * event, that probe's offset against the unit's baseline is learnt again, as the median of its
 * raw residual over the next `ringsToLearn` steady rings (CANSIGHT_PROBE_OFFSET_RINGS), and
 * taken off its residual from then on. Until its first steady ring after the event the probe
 * is not judged against its normal (its offset is unknown); while learning, the median so far
 * is used, so the replacement shows no step. A learnt offset is kept in the event
 * (learnt_offsets) and comes back from there after a restart. A baseline whose reference
 * window ends after the replacement already holds the new probe's reading: against it there is
 * nothing to take off, so a replacement counts only for baselines fitted before it. No I/O here.
 */
import { baselineMedianAt, type UnitBaseline } from '../core/baseline.ts';
import type { ProbeReplacement } from '../db/events.ts';
import { median } from '../core/stats.ts';

export interface LearntOffset {
  eventId: string;
  /** Index from 0. */
  thermocouple: number;
  offsetC: number;
}

interface Learning {
  r: ProbeReplacement;
  samples: number[];
  offsetC: number;
}

export class ProbeOffsets {
  /** Replacements per probe, oldest first. */
  private readonly byProbe = new Map<number, ProbeReplacement[]>();
  private readonly learning = new Map<string, Learning>();
  private readonly offsets: Float64Array;

  constructor(replacements: readonly ProbeReplacement[], m: number, private readonly ringsToLearn: number) {
    for (const r of replacements) {
      if (r.thermocouple < 0 || r.thermocouple >= m) continue;
      const list = this.byProbe.get(r.thermocouple) ?? [];
      list.push(r);
      this.byProbe.set(r.thermocouple, list.sort((a, b) => a.atMs - b.atMs));
    }
    this.offsets = new Float64Array(m);
  }

  get empty(): boolean {
    return this.byProbe.size === 0;
  }

  /** End of the reference window of the baseline judging the rings, ms. */
  baselineToMs = -Infinity;

  /** The replacement of probe i in force at tsMs (the latest at or before it), if after the baseline's reference window. */
  private inForce(i: number, tsMs: number): ProbeReplacement | null {
    const list = this.byProbe.get(i);
    if (!list) return null;
    let found: ProbeReplacement | null = null;
    for (const r of list) if (r.atMs <= tsMs) found = r;
    return found && found.atMs > this.baselineToMs ? found : null;
  }

  private key = (r: ProbeReplacement) => `${r.eventId}/${r.thermocouple}`;

  /**
   * The offset per probe at tsMs, °C (0: not replaced; NaN: replaced, nothing learnt yet), or
   * null when no probe of the unit is replaced before tsMs. The array is reused.
   */
  at(tsMs: number): Float64Array | null {
    let any = false;
    this.offsets.fill(0);
    for (const i of this.byProbe.keys()) {
      const r = this.inForce(i, tsMs);
      if (!r) continue;
      any = true;
      this.offsets[i] = r.learntOffsetC ?? this.learning.get(this.key(r))?.offsetC ?? NaN;
    }
    return any ? this.offsets : null;
  }

  /**
   * Learns from a steady ring at tsMs: for each probe whose offset is still being learnt, its raw
   * residual (deviation less its normal at this load) joins its samples. Returns the offsets
   * learnt to the end with this ring, for the caller to store; `at` gives the updated offsets.
   */
  learn(tsMs: number, deviationC: ArrayLike<number>, loadFraction: number, baseline: UnitBaseline): LearntOffset[] {
    const done: LearntOffset[] = [];
    for (const i of this.byProbe.keys()) {
      const r = this.inForce(i, tsMs);
      if (!r || r.learntOffsetC !== null) continue;
      const bt = baseline.thermocouples[i];
      const raw = bt ? deviationC[i] - baselineMedianAt(bt, loadFraction) : NaN;
      if (!Number.isFinite(raw)) continue;
      const k = this.key(r);
      let l = this.learning.get(k);
      if (!l) this.learning.set(k, (l = { r, samples: [], offsetC: NaN }));
      l.samples.push(raw);
      l.offsetC = median(l.samples);
      if (l.samples.length >= this.ringsToLearn) {
        r.learntOffsetC = l.offsetC;
        this.learning.delete(k);
        done.push({ eventId: r.eventId, thermocouple: i, offsetC: l.offsetC });
      }
    }
    return done;
  }

  /** True when some probe replaced at or before tsMs is still learning its offset. */
  learningAt(tsMs: number): boolean {
    for (const i of this.byProbe.keys()) {
      const r = this.inForce(i, tsMs);
      if (r && r.learntOffsetC === null) return true;
    }
    return false;
  }
}
