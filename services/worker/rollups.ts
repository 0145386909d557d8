/**
 * Hourly and daily rollups of ring analysis: per unit (spread, spread without the one or two
 * coldest, ring mean, corrected load), per chamber (deviation; residual on steady rings) and
 * per thermocouple (deviation; residual on steady rings; invalid share). Each is a mergeable
 * (count, sum, sum of squares, min, max), so a batch's partial rollups merge into what is
 * stored and a bucket touched by late rings is recomputed from its rings. Values are rounded
 * to float4 first, as stored, so a recompute from stored analysis gives the same numbers.
 */
import type { AnalysisColumns, AnalysisRow, RollupPeriod, RollupRow } from '../db/analysis.ts';

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

function addValue(r: RollupRow, i: number, v: number): void {
  if (!Number.isFinite(v)) return;
  const x = Math.fround(v);
  if (r.n.length <= i) grow(r, i + 1);
  r.n[i]++;
  r.sum[i] += x;
  r.sumsq[i] += x * x;
  if (!(r.min[i] <= x)) r.min[i] = x;
  if (!(r.max[i] >= x)) r.max[i] = x;
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

/** Rollups being built for one unit. */
export class RollupAccumulator {
  private readonly rows = new Map<string, RollupRow>();
  private readonly current: Record<RollupPeriod, { bucket: number; byMetric: Map<string, RollupRow> }> = {
    hour: { bucket: NaN, byMetric: new Map() },
    day: { bucket: NaN, byMetric: new Map() },
  };

  private row(period: RollupPeriod, metric: RollupMetric, bucketMs: number): RollupRow {
    const cur = this.current[period];
    if (cur.bucket !== bucketMs) {
      cur.bucket = bucketMs;
      cur.byMetric = new Map();
    }
    let r = cur.byMetric.get(metric);
    if (!r) {
      const k = keyOf(period, metric, bucketMs);
      r = this.rows.get(k);
      if (!r) this.rows.set(k, (r = emptyRow(period, metric, bucketMs)));
      cur.byMetric.set(metric, r);
    }
    return r;
  }

  private addRing(
    tsMs: number,
    steady: boolean,
    scalars: [number, number, number, number, number],
    validity: ArrayLike<number>,
    tcDev: ArrayLike<number>,
    tcRes: ArrayLike<number> | null,
    chDev: ArrayLike<number>,
    chRes: ArrayLike<number> | null,
  ): void {
    for (const period of ['hour', 'day'] as const) {
      const b = bucketOf(period, tsMs);
      addValue(this.row(period, 'spread', b), 0, scalars[0]);
      addValue(this.row(period, 'spread_excl1', b), 0, scalars[1]);
      addValue(this.row(period, 'spread_excl2', b), 0, scalars[2]);
      addValue(this.row(period, 'ring_mean', b), 0, scalars[3]);
      addValue(this.row(period, 'load_fraction', b), 0, scalars[4]);
      const cd = this.row(period, 'chamber_deviation', b);
      grow(cd, chDev.length);
      for (let k = 0; k < chDev.length; k++) addValue(cd, k, chDev[k]);
      const td = this.row(period, 'tc_deviation', b);
      const ti = this.row(period, 'tc_invalid', b);
      grow(td, tcDev.length);
      for (let i = 0; i < tcDev.length; i++) {
        addValue(td, i, tcDev[i]);
        addValue(ti, i, validity[i] === 0 ? 0 : 1);
      }
      if (steady && chRes) {
        const cr = this.row(period, 'chamber_residual', b);
        for (let k = 0; k < chRes.length; k++) addValue(cr, k, chRes[k]);
      }
      if (steady && tcRes) {
        const tr = this.row(period, 'tc_residual', b);
        for (let i = 0; i < tcRes.length; i++) addValue(tr, i, tcRes[i]);
      }
    }
  }

  /** Adds one freshly analysed ring. */
  add(a: AnalysisRow): void {
    this.addRing(a.tsMs, a.steady, [a.spread, a.spreadExcl1, a.spreadExcl2, a.ringMean, a.loadFraction], a.validity, a.tcDeviation, a.tcResidual, a.chamberDeviation, a.chamberResidual);
  }

  /** Adds ring i of stored analysis. */
  addStored(c: AnalysisColumns, i: number): void {
    this.addRing(
      c.tsMs[i],
      c.steady[i] === 1,
      [c.spread[i], c.spreadExcl1[i], c.spreadExcl2[i], c.ringMean[i], c.loadFraction[i]],
      c.validity[i],
      c.tcDeviation[i],
      c.tcResidual[i],
      c.chamberDeviation[i],
      c.chamberResidual[i],
    );
  }

  /** Adds a stored rollup row (days recomputed from their hours). */
  addRollup(r: RollupRow, period: RollupPeriod): void {
    const b = bucketOf(period, r.bucketMs);
    const k = keyOf(period, r.metric, b);
    let mine = this.rows.get(k);
    if (!mine) this.rows.set(k, (mine = emptyRow(period, r.metric, b)));
    mergeRollupInto(mine, r);
  }

  buckets(period: RollupPeriod): number[] {
    const s = new Set<number>();
    for (const r of this.rows.values()) if (r.period === period) s.add(r.bucketMs);
    return [...s].sort((a, b) => a - b);
  }

  all(): RollupRow[] {
    return [...this.rows.values()];
  }

  /** Merges stored rows (of buckets this accumulator touched) into its rows; returns the merged rows. */
  mergedWith(stored: RollupRow[]): RollupRow[] {
    const out = new Map<string, RollupRow>();
    for (const r of this.rows.values()) out.set(keyOf(r.period, r.metric, r.bucketMs), { ...r, n: r.n.slice(), sum: r.sum.slice(), sumsq: r.sumsq.slice(), min: r.min.slice(), max: r.max.slice() });
    for (const s of stored) {
      const k = keyOf(s.period, s.metric, s.bucketMs);
      const mine = out.get(k);
      if (!mine) continue;
      // Stored first, then this batch: the order a recompute over the bucket would add in.
      const merged = mergeRollupInto({ ...s, n: s.n.slice(), sum: s.sum.slice(), sumsq: s.sumsq.slice(), min: s.min.slice(), max: s.max.slice() }, mine);
      out.set(k, merged);
    }
    return [...out.values()];
  }
}
