/**
 * Hourly and daily rollups of ring analysis: per unit (spread, spread without the one or two
 * coldest, ring mean, corrected load), per chamber (deviation; residual on steady rings) and
 * per thermocouple (deviation; residual on steady rings; invalid share). Each is a mergeable
 * (count, sum, sum of squares, min, max), so a batch's partial rollups merge into what is
 * stored and a bucket touched by late rings is recomputed from its rings. Values are rounded
 * to float4 first, as stored, so a recompute from stored analysis gives the same numbers.
 */
import type { AnalysisColumns } from '../db/analysis.ts';
import type { AnalysisRow } from '../db/analysis-write.ts';
import type { RollupPeriod, RollupRow } from '../db/rollups.ts';

export const HOUR_MS = 3_600_000;
export const DAY_MS = 86_400_000;

/** Rollup metrics and what each array element is. */
export const ROLLUP_METRICS = {
  spread: 'unit',
  spread_excl1: 'unit',
  spread_excl2: 'unit',
  ring_mean: 'unit',
  load_fraction: 'unit',
  chamber_deviation: 'chamber',
  chamber_residual: 'chamber',
  tc_deviation: 'thermocouple',
  tc_residual: 'thermocouple',
  tc_invalid: 'thermocouple',
} as const;
export type RollupMetric = keyof typeof ROLLUP_METRICS;

export const bucketOf = (period: RollupPeriod, ms: number) => {
  const size = period === 'hour' ? HOUR_MS : DAY_MS;
  return Math.floor(ms / size) * size;
};

function emptyRow(period: RollupPeriod, metric: string, bucketMs: number): RollupRow {
  return { period, metric, bucketMs, n: [], sum: [], sumsq: [], min: [], max: [] };
}

function grow(r: RollupRow, len: number): void {
  while (r.n.length < len) {
    r.n.push(0);
    r.sum.push(0);
    r.sumsq.push(0);
    r.min.push(NaN);
    r.max.push(NaN);
  }
}

/** Merges b into a (same period, metric and bucket); returns a. */
export function mergeRollupInto(a: RollupRow, b: RollupRow): RollupRow {
  grow(a, b.n.length);
  for (let i = 0; i < b.n.length; i++) {
    if (!(b.n[i] > 0)) continue;
    a.n[i] += b.n[i];
    a.sum[i] += b.sum[i];
    a.sumsq[i] += b.sumsq[i];
    if (!(a.min[i] <= b.min[i])) a.min[i] = b.min[i];
    if (!(a.max[i] >= b.max[i])) a.max[i] = b.max[i];
  }
  return a;
}

const keyOf = (period: RollupPeriod, metric: string, bucketMs: number) => `${period}|${metric}|${bucketMs}`;

const METRICS = Object.keys(ROLLUP_METRICS) as RollupMetric[];
const M = Object.fromEntries(METRICS.map((m, i) => [m, i])) as Record<RollupMetric, number>;

/** One metric of one hour while it is being built: typed arrays, grown as needed. */
class Slot {
  len = 0;
  n = new Float64Array(0);
  sum = new Float64Array(0);
  sumsq = new Float64Array(0);
  min = new Float64Array(0);
  max = new Float64Array(0);

  ensure(len: number): void {
    if (len > this.n.length) {
      const cap = Math.max(len, 2 * this.n.length, 4);
      const more = (a: Float64Array, fill: number) => {
        const b = new Float64Array(cap).fill(fill);
        b.set(a);
        return b;
      };
      this.n = more(this.n, 0);
      this.sum = more(this.sum, 0);
      this.sumsq = more(this.sumsq, 0);
      this.min = more(this.min, NaN);
      this.max = more(this.max, NaN);
    }
    if (len > this.len) this.len = len;
  }

  add(i: number, v: number): void {
    if (!Number.isFinite(v)) return;
    const x = Math.fround(v);
    if (i >= this.len) this.ensure(i + 1);
    this.n[i]++;
    this.sum[i] += x;
    this.sumsq[i] += x * x;
    if (!(this.min[i] <= x)) this.min[i] = x;
    if (!(this.max[i] >= x)) this.max[i] = x;
  }

  /** add(i, values[i]) for every i: the length grows only to the last finite value, as with add. */
  addAll(values: ArrayLike<number>): void {
    const len = values.length;
    let { n, sum, sumsq, min, max } = this;
    for (let i = 0; i < len; i++) {
      const v = values[i];
      if (!Number.isFinite(v)) continue;
      const x = Math.fround(v);
      if (i >= this.len) {
        this.ensure(i + 1);
        ({ n, sum, sumsq, min, max } = this);
      }
      n[i]++;
      sum[i] += x;
      sumsq[i] += x * x;
      if (!(min[i] <= x)) min[i] = x;
      if (!(max[i] >= x)) max[i] = x;
    }
  }

  /** Per element: 0 where the code is 0 (valid), else 1; the first `len` codes. */
  addInvalid(codes: ArrayLike<number>, len: number): void {
    if (len > this.len) this.ensure(len);
    const { n, sum, sumsq, min, max } = this;
    for (let i = 0; i < len; i++) {
      const x = codes[i] === 0 ? 0 : 1;
      n[i]++;
      sum[i] += x;
      sumsq[i] += x;
      if (!(min[i] <= x)) min[i] = x;
      if (!(max[i] >= x)) max[i] = x;
    }
  }

  row(metric: string, bucketMs: number): RollupRow {
    const k = this.len;
    const r: RollupRow = { period: 'hour', metric, bucketMs, n: new Array<number>(k), sum: new Array<number>(k), sumsq: new Array<number>(k), min: new Array<number>(k), max: new Array<number>(k) };
    for (let i = 0; i < k; i++) {
      r.n[i] = this.n[i];
      r.sum[i] = this.sum[i];
      r.sumsq[i] = this.sumsq[i];
      r.min[i] = this.min[i];
      r.max[i] = this.max[i];
    }
    return r;
  }
}

const copyRow = (r: RollupRow, period: RollupPeriod = r.period, bucketMs: number = r.bucketMs): RollupRow => ({
  period,
  metric: r.metric,
  bucketMs,
  n: r.n.slice(),
  sum: r.sum.slice(),
  sumsq: r.sumsq.slice(),
  min: r.min.slice(),
  max: r.max.slice(),
});

/**
 * Day rows from hour rows: each day is its hours merged in time order (as a recompute of the
 * day from stored hours does). `onto`: stored day rows the hours are merged into (the hours are
 * then the part of the day not yet in them).
 */
export function daysFromHours(hours: RollupRow[], onto: RollupRow[] = []): RollupRow[] {
  const out = new Map<string, RollupRow>();
  for (const d of onto) out.set(keyOf('day', d.metric, d.bucketMs), copyRow(d));
  const sorted = [...hours].sort((a, b) => a.bucketMs - b.bucketMs || (a.metric < b.metric ? -1 : a.metric > b.metric ? 1 : 0));
  const touched = new Set<string>();
  for (const h of sorted) {
    const b = bucketOf('day', h.bucketMs);
    const k = keyOf('day', h.metric, b);
    let d = out.get(k);
    if (!d) out.set(k, (d = emptyRow('day', h.metric, b)));
    mergeRollupInto(d, h);
    touched.add(k);
  }
  return [...out.entries()].filter(([k]) => touched.has(k)).map(([, d]) => d);
}

/**
 * Hourly rollups being built for one unit from analysed rings (the days follow from the hours).
 * Per ring: one bucket test and plain typed-array arithmetic per value.
 */
export class RollupAccumulator {
  private readonly hours = new Map<number, Slot[]>();
  private bucket = NaN;
  private slots: Slot[] = [];

  private slotsFor(tsMs: number): Slot[] {
    const b = bucketOf('hour', tsMs);
    if (b !== this.bucket) {
      this.bucket = b;
      let s = this.hours.get(b);
      if (!s) this.hours.set(b, (s = []));
      this.slots = s;
    }
    return this.slots;
  }

  private slot(slots: Slot[], m: number): Slot {
    return (slots[m] ??= new Slot());
  }

  private addRing(
    tsMs: number,
    steady: boolean,
    s0: number,
    s1: number,
    s2: number,
    s3: number,
    s4: number,
    validity: ArrayLike<number>,
    tcDev: ArrayLike<number>,
    tcRes: ArrayLike<number> | null,
    chDev: ArrayLike<number>,
    chRes: ArrayLike<number> | null,
  ): void {
    const slots = this.slotsFor(tsMs);
    this.slot(slots, M.spread).add(0, s0);
    this.slot(slots, M.spread_excl1).add(0, s1);
    this.slot(slots, M.spread_excl2).add(0, s2);
    this.slot(slots, M.ring_mean).add(0, s3);
    this.slot(slots, M.load_fraction).add(0, s4);
    const cd = this.slot(slots, M.chamber_deviation);
    cd.ensure(chDev.length);
    cd.addAll(chDev);
    const td = this.slot(slots, M.tc_deviation);
    td.ensure(tcDev.length);
    td.addAll(tcDev);
    this.slot(slots, M.tc_invalid).addInvalid(validity, tcDev.length);
    if (steady && chRes) this.slot(slots, M.chamber_residual).addAll(chRes);
    if (steady && tcRes) this.slot(slots, M.tc_residual).addAll(tcRes);
  }

  /** Adds one freshly analysed ring. */
  add(a: AnalysisRow): void {
    this.addRing(a.tsMs, a.steady, a.spread, a.spreadExcl1, a.spreadExcl2, a.ringMean, a.loadFraction, a.validity, a.tcDeviation, a.tcResidual, a.chamberDeviation, a.chamberResidual);
  }

  /** Adds ring i of stored analysis. */
  addStored(c: AnalysisColumns, i: number): void {
    this.addRing(
      c.tsMs[i],
      c.steady[i] === 1,
      c.spread[i],
      c.spreadExcl1[i],
      c.spreadExcl2[i],
      c.ringMean[i],
      c.loadFraction[i],
      c.validity[i],
      c.tcDeviation[i],
      c.tcResidual[i],
      c.chamberDeviation[i],
      c.chamberResidual[i],
    );
  }

  /** Hour buckets touched, oldest first. */
  hourBuckets(): number[] {
    return [...this.hours.keys()].sort((a, b) => a - b);
  }

  /** Day buckets touched, oldest first. */
  dayBuckets(): number[] {
    return [...new Set(this.hourBuckets().map((h) => bucketOf('day', h)))];
  }

  /** The hour rows of the rings added. */
  hourRows(): RollupRow[] {
    const out: RollupRow[] = [];
    for (const b of this.hourBuckets()) {
      const slots = this.hours.get(b) as Slot[];
      for (let m = 0; m < METRICS.length; m++) if (slots[m]) out.push(slots[m].row(METRICS[m], b));
    }
    return out;
  }

  /**
   * Merges stored rows (of the hours and days this accumulator touched) with its rows; returns
   * every hour and day row to write.
   */
  mergedWith(stored: RollupRow[]): RollupRow[] {
    const storedHours = new Map<string, RollupRow>();
    const storedDays: RollupRow[] = [];
    for (const s of stored) {
      if (s.period === 'hour') storedHours.set(keyOf('hour', s.metric, s.bucketMs), s);
      else storedDays.push(s);
    }
    const mine = this.hourRows();
    // Stored first, then this batch: the order a recompute over the bucket would add in.
    const hours = mine.map((h) => {
      const s = storedHours.get(keyOf('hour', h.metric, h.bucketMs));
      return s ? mergeRollupInto(copyRow(s), h) : h;
    });
    return [...hours, ...daysFromHours(mine, storedDays)];
  }
}
