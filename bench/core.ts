/**
 * Benchmark of the per-ring hot path: validity, spread and chamber estimates for an
 * 18-thermocouple, 10-chamber unit over 1,000,000 generated rings, against a bare loop that only
 * computes hottest − coldest over the same arrays. Last line: one JSON object.
 */
import { analyseRing, prepareUnit, ringFromChambers, type UnitConfig } from '../services/core/index.ts';
import { mulberry32 } from '../test/core/helpers.ts';

const RINGS = Number(process.env.BENCH_RINGS ?? 1_000_000);
const POOL = 4096;

const config: UnitConfig = {
  ratedPowerMw: 24,
  thermocouples: { count: 18, firstAngleDeg: 10 },
  chambers: { count: 10, firstAngleDeg: 0 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
};

const ctx = prepareUnit(config);
const rand = mulberry32(20260301);
const rings: Float64Array[] = [];
const loads = new Float64Array(POOL);
for (let r = 0; r < POOL; r++) {
  const load = 0.3 + 0.7 * rand();
  const chamberDev = Array.from({ length: 10 }, () => (rand() - 0.5) * 8);
  if (r % 50 === 0) chamberDev[Math.floor(rand() * 10)] -= 60 + 60 * rand();
  const ring = ringFromChambers(config, chamberDev, load, 420 + 150 * load, ctx.kernel);
  for (let i = 0; i < ring.length; i++) ring[i] += (rand() - 0.5) * 4;
  if (r % 97 === 0) ring[Math.floor(rand() * 18)] = NaN;
  if (r % 131 === 0) ring[Math.floor(rand() * 18)] += 120;
  rings.push(ring);
  loads[r] = load;
}

function runAnalysis(n: number): number {
  let check = 0;
  for (let j = 0; j < n; j++) {
    const k = j & (POOL - 1);
    const a = analyseRing(ctx, rings[k], loads[k]);
    check += a.spread.validCount;
  }
  return check;
}

function runBare(n: number): number {
  let check = 0;
  for (let j = 0; j < n; j++) {
    const ring = rings[j & (POOL - 1)];
    let hi = -Infinity;
    let lo = Infinity;
    for (let i = 0; i < ring.length; i++) {
      const v = ring[i];
      if (v > hi) hi = v;
      if (v < lo) lo = v;
    }
    check += hi - lo;
  }
  return check;
}

// Warm-up (JIT, solver cache for every load bin and mask in the pool).
runAnalysis(200_000);
runBare(200_000);

// Alternating repetitions on a shared machine: the medians, and the ratio within each pair.
const REPEATS = Number(process.env.BENCH_REPEATS ?? 5);
const full: number[] = [];
const bare: number[] = [];
const ratios: number[] = [];
let c1 = 0;
let c2 = 0;
for (let rep = 0; rep < REPEATS; rep++) {
  let t0 = process.hrtime.bigint();
  c1 += runAnalysis(RINGS);
  const analysisS = Number(process.hrtime.bigint() - t0) / 1e9;
  t0 = process.hrtime.bigint();
  c2 += runBare(RINGS);
  const bareS = Number(process.hrtime.bigint() - t0) / 1e9;
  full.push(RINGS / analysisS);
  bare.push(RINGS / bareS);
  ratios.push(analysisS / bareS);
  console.log(`run ${rep + 1}: full ${Math.round(RINGS / analysisS)} rings/s, bare ${Math.round(RINGS / bareS)} rings/s`);
}
const median = (xs: number[]) => {
  const s = xs.slice().sort((a, b) => a - b);
  const h = s.length >> 1;
  return s.length % 2 ? s[h] : (s[h - 1] + s[h]) / 2;
};
const ringsPerS = Math.round(median(full));
const bareRingsPerS = Math.round(median(bare));
const ratio = Math.round(median(ratios) * 100) / 100;
console.log(`full ring analysis (validity, spread, chamber estimates), 18 TC / 10 chambers, ${RINGS} rings × ${REPEATS}: median ${ringsPerS} rings/s on one core (goal ≥ 300,000)`);
console.log(`bare hottest − coldest loop over the same rings: median ${bareRingsPerS} rings/s`);
console.log(`bare / full: median ${ratio}; solvers built ${ctx.solversBuilt}, cached ${ctx.cache.size} (checksums ${c1}, ${c2.toFixed(0)})`);
console.log(JSON.stringify({ bench: 'core', ringsPerS, bareRingsPerS, ratio }));
