/**
 * The unit analyser's memory of recent rings, in typed-array columns used as ring buffers, so
 * a unit's memory reaches its final size within its first rings instead of growing while its
 * windows fill (at 1 Hz the window tests fill for 30 minutes). A window starts with room for
 * FIRST_CAPACITY samples; when it is first full, the spacing of those samples gives the unit's
 * ring rate and the window is sized for its whole span at that rate, with an eighth to spare
 * (the window tests' rings are sized at the same moment by the steady-state window, which sees
 * every ring). It grows again only if the rate rises. No I/O here, and no allocation per sample
 * once sized.
 */
import { steadyState, steadyStateOfWindow, type SteadyStateOptions, type SteadyStateResult } from '../core/correction.ts';

/** Samples a window holds before the unit's ring rate is known. */
export const FIRST_CAPACITY = 16;

/** Room for samples `spacing` apart over `span` (both ends included), with an eighth to spare. */
export function capacityFor(span: number, spacing: number): number {
  if (!(spacing > 0)) return Infinity;
  return Math.ceil(((Math.floor(span / spacing) + 1) * 9) / 8) + 1;
}

/** The mean spacing of samples whose first and last times are `first` and `last`, or NaN. */
const spacingOf = (first: number, last: number, count: number) => (count >= 2 && last > first ? (last - first) / (count - 1) : NaN);

/** A ring buffer of slot indices (a queue of samples of a window), oldest first. */
class SlotQueue {
  slots: Int32Array;
  head = 0;
  size = 0;

  constructor(capacity: number) {
    this.slots = new Int32Array(capacity);
  }

  at(i: number): number {
    return this.slots[(this.head + i) % this.slots.length];
  }

  first(): number {
    return this.slots[this.head];
  }

  last(): number {
    return this.at(this.size - 1);
  }

  push(slot: number): void {
    this.slots[(this.head + this.size) % this.slots.length] = slot;
    this.size++;
  }

  shift(): void {
    this.head = (this.head + 1) % this.slots.length;
    this.size--;
  }

  pop(): void {
    this.size--;
  }

  /** The same queue with room for `capacity` slots, its slots renumbered by `renumber`. */
  resized(capacity: number, renumber: (slot: number) => number): SlotQueue {
    const q = new SlotQueue(capacity);
    for (let i = 0; i < this.size; i++) q.push(renumber(this.at(i)));
    return q;
  }
}

/** A ring buffer of samples in typed-array columns, oldest first: the times, and a subclass's others. */
abstract class TimedRing {
  protected t = new Float64Array(FIRST_CAPACITY);
  protected head = 0;
  protected size = 0;

  get capacity(): number {
    return this.t.length;
  }

  /** Samples held. */
  get count(): number {
    return this.size;
  }

  /** The slot of the i-th sample held (0 = oldest). */
  protected slot(i: number): number {
    return (this.head + i) % this.t.length;
  }

  /** Mean spacing of the samples held, or NaN. */
  protected spacing(): number {
    return spacingOf(this.t[this.head], this.t[this.slot(this.size - 1)], this.size);
  }

  /** Times of the samples held, oldest first. */
  times(): number[] {
    const out: number[] = [];
    for (let i = 0; i < this.size; i++) out.push(this.t[this.slot(i)]);
    return out;
  }
}

/**
 * The steady-state window: times (s) and corrected loads of the rings of the last windowS
 * seconds, with running minimum and maximum queues of the finite loads and their count, so a
 * ring's test does not scan the window. With samples out of time order the window is scanned
 * (steadyState) as it stands.
 */
export class SteadyWindow extends TimedRing {
  private load = new Float64Array(FIRST_CAPACITY);
  private finite = 0;
  private minQ = new SlotQueue(FIRST_CAPACITY);
  private maxQ = new SlotQueue(FIRST_CAPACITY);
  private unordered = false;
  /** Mean spacing (s) of the samples the window was last sized by; NaN before. */
  ringSpacingS = NaN;

  constructor(private readonly windowS: number) {
    super();
  }

  private dropOldest(): void {
    const h = this.head;
    if (Number.isFinite(this.load[h])) this.finite--;
    if (this.minQ.size > 0 && this.minQ.first() === h) this.minQ.shift();
    if (this.maxQ.size > 0 && this.maxQ.first() === h) this.maxQ.shift();
    this.head = (h + 1) % this.t.length;
    this.size--;
  }

  /** Adds (tS, load) and drops what is older than the window; true when that resized the window. */
  push(tS: number, load: number): boolean {
    const t = this.t;
    if (this.size > 0 && !(tS >= t[this.slot(this.size - 1)])) this.unordered = true;
    const from = tS - this.windowS;
    while (this.size > 0 && t[this.head] < from) this.dropOldest();
    const resized = this.size === this.t.length;
    if (resized) this.grow();
    const s = this.slot(this.size);
    this.t[s] = tS;
    this.load[s] = load;
    this.size++;
    if (Number.isFinite(load)) {
      this.finite++;
      const L = this.load;
      const minQ = this.minQ;
      while (minQ.size > 0 && L[minQ.last()] >= load) minQ.pop();
      minQ.push(s);
      const maxQ = this.maxQ;
      while (maxQ.size > 0 && L[maxQ.last()] <= load) maxQ.pop();
      maxQ.push(s);
    }
    return resized;
  }

  /** Full: room for the whole window at the ring rate of the samples held (at least twice the room). */
  private grow(): void {
    const cap = this.t.length;
    this.ringSpacingS = this.spacing();
    const fit = capacityFor(this.windowS, this.ringSpacingS);
    const next = Math.max(2 * cap, Number.isFinite(fit) ? fit : 0);
    const t = new Float64Array(next);
    const load = new Float64Array(next);
    for (let i = 0; i < this.size; i++) {
      t[i] = this.t[this.slot(i)];
      load[i] = this.load[this.slot(i)];
    }
    const renumber = (slot: number) => (slot - this.head + cap) % cap;
    this.minQ = this.minQ.resized(next, renumber);
    this.maxQ = this.maxQ.resized(next, renumber);
    this.t = t;
    this.load = load;
    this.head = 0;
  }

  /**
   * steadyState over the window at atS (the time just pushed). With samples in time order every
   * sample left in the window lies in [atS − windowS, atS], so the running summary is exactly what
   * steadyState would gather; otherwise the window is scanned.
   */
  steadyAt(speedPct: number, atS: number, o: SteadyStateOptions): SteadyStateResult {
    if (this.unordered) {
      const times = new Float64Array(this.size);
      const loads = new Float64Array(this.size);
      for (let i = 0; i < this.size; i++) {
        times[i] = this.t[this.slot(i)];
        loads[i] = this.load[this.slot(i)];
      }
      return steadyState(speedPct, times, loads, atS, o);
    }
    if (this.finite === 0) return steadyStateOfWindow(speedPct, atS, 0, Infinity, -Infinity, Infinity, o);
    let first = 0;
    while (!Number.isFinite(this.load[this.slot(first)])) first++;
    return steadyStateOfWindow(speedPct, atS, this.finite, this.load[this.minQ.first()], this.load[this.maxQ.first()], this.t[this.slot(first)], o);
  }
}

/**
 * The window tests' rings: times (ms), readings and corrected loads of rings in service over the
 * last windowMs. The tests look at `rings` rings spread over the window, so a ring closer than
 * half that spacing to the last one kept is not kept (at one ring a minute every ring is; at one
 * a second, one in fifteen): in time order at most 2 × rings + 1 lie in the window, which bounds
 * its size whatever the ring rate. Readings are copied, never a view of a batch's buffer.
 */
export class ReadingsWindow extends TimedRing {
  /** Most rings held: 2 × rings + 1 (the oldest is dropped beyond it, only with rings out of time order). */
  readonly bound: number;
  private readonly keepSpacingMs: number;
  private load = new Float64Array(FIRST_CAPACITY);
  private len = new Uint8Array(FIRST_CAPACITY);
  /** Readings per ring held (the longest ring's count); ring in slot s at [s × stride, s × stride + len[s]). */
  private stride = 0;
  private values = new Float64Array(0);

  constructor(
    private readonly windowMs: number,
    rings: number,
  ) {
    super();
    this.bound = 2 * rings + 1;
    this.keepSpacingMs = windowMs / (2 * rings);
  }

  /** Makes room for the window at rings `ringSpacingMs` apart (no more than the bound). */
  reserve(ringSpacingMs: number): void {
    const fit = Math.min(this.bound, capacityFor(this.windowMs, Math.max(ringSpacingMs, this.keepSpacingMs)));
    if (fit > this.t.length) this.resize(fit, this.stride);
  }

  private resize(capacity: number, stride: number): void {
    const t = new Float64Array(capacity);
    const load = new Float64Array(capacity);
    const len = new Uint8Array(capacity);
    const values = new Float64Array(capacity * stride);
    for (let i = 0; i < this.size; i++) {
      const s = this.slot(i);
      t[i] = this.t[s];
      load[i] = this.load[s];
      len[i] = this.len[s];
      values.set(this.values.subarray(s * this.stride, s * this.stride + this.len[s]), i * stride);
    }
    this.t = t;
    this.load = load;
    this.len = len;
    this.values = values;
    this.stride = stride;
    this.head = 0;
  }

  /**
   * Drops the rings older than the window at tsMs, then keeps this ring when it is in service
   * and not closer than the keeping spacing to the last one kept (or before it).
   */
  push(tsMs: number, readings: ArrayLike<number>, load: number, inService: boolean): void {
    const from = tsMs - this.windowMs;
    while (this.size > 0 && this.t[this.head] < from) {
      this.head = (this.head + 1) % this.t.length;
      this.size--;
    }
    if (!inService) return;
    const last = this.size > 0 ? this.t[this.slot(this.size - 1)] : NaN;
    if (this.size > 0 && !(tsMs - last >= this.keepSpacingMs || tsMs < last)) return;
    const m = readings.length;
    if (this.size === this.t.length && this.size < this.bound) {
      const fit = capacityFor(this.windowMs, Math.max(this.spacing(), this.keepSpacingMs));
      this.resize(Math.min(this.bound, Math.max(2 * this.size, Number.isFinite(fit) ? fit : 0)), Math.max(m, this.stride));
    } else if (m > this.stride) this.resize(this.t.length, m);
    if (this.size === this.t.length) {
      this.head = (this.head + 1) % this.t.length;
      this.size--;
    }
    const s = this.slot(this.size);
    this.t[s] = tsMs;
    this.load[s] = load;
    this.len[s] = m;
    const at = s * this.stride;
    for (let i = 0; i < m; i++) this.values[at + i] = readings[i];
    this.size++;
  }

  /**
   * The rings held with m readings, at most `most` of them evenly spread over the window and the
   * newest always among them, oldest first: views of their readings (valid until the next push)
   * and their loads.
   */
  pick(m: number, most: number): { rings: Float64Array[]; loads: number[] } {
    const all: number[] = [];
    for (let i = 0; i < this.size; i++) if (this.len[this.slot(i)] === m) all.push(this.slot(i));
    const step = Math.max(1, Math.ceil(all.length / most));
    const slots = step === 1 ? all : all.filter((_, i) => (all.length - 1 - i) % step === 0);
    return {
      rings: slots.map((s) => this.values.subarray(s * this.stride, s * this.stride + m)),
      loads: slots.map((s) => this.load[s]),
    };
  }
}

/**
 * The validity codes of the last `capacity` rings, with counts per thermocouple (the first
 * maxM) of isolated outliers and missing readings among them. Room for them all is made at the
 * first ring, sized by its thermocouple count, and again only for a ring with more.
 */
export class RecentCodes {
  readonly outliers: Int32Array;
  readonly missing: Int32Array;
  private len: Uint8Array;
  private stride = 0;
  private codes = new Uint8Array(0);
  private head = 0;
  private size = 0;

  constructor(
    readonly capacity: number,
    private readonly maxM: number,
    private readonly outlierCode: number,
    private readonly missingCode: number,
  ) {
    this.outliers = new Int32Array(maxM);
    this.missing = new Int32Array(maxM);
    this.len = new Uint8Array(capacity);
  }

  private count(at: number, n: number, by: number): void {
    for (let i = 0; i < Math.min(n, this.maxM); i++) {
      const c = this.codes[at + i];
      if (c === this.outlierCode) this.outliers[i] += by;
      else if (c === this.missingCode) this.missing[i] += by;
    }
  }

  /** Adds (a copy of) a ring's codes and drops the oldest beyond the capacity. */
  push(src: ArrayLike<number>): void {
    if (src.length > this.stride) {
      const codes = new Uint8Array(this.capacity * src.length);
      for (let s = 0; s < this.capacity; s++) codes.set(this.codes.subarray(s * this.stride, s * this.stride + this.len[s]), s * src.length);
      this.codes = codes;
      this.stride = src.length;
    }
    let s: number;
    if (this.size === this.capacity) {
      s = this.head;
      this.count(s * this.stride, this.len[s], -1);
      this.head = (this.head + 1) % this.capacity;
    } else s = (this.head + this.size++) % this.capacity;
    const at = s * this.stride;
    for (let i = 0; i < src.length; i++) this.codes[at + i] = src[i];
    this.len[s] = src.length;
    this.count(at, src.length, 1);
  }
}
