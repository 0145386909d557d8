/**
 * Generation speed of the simulator (a benchmark, not a test): the demo fleet over 90 days at one
 * ring a minute in steady running, 1 Hz in transients. Run: npx tsx services/sim/bench.ts [days]
 * Last line is one JSON object with the figures.
 */
import { DAY_MS } from './operation.ts';
import { demoFleet, DEFAULT_DEMO_END } from './fleet.ts';
import { simulateUnit } from './generator.ts';

const days = Number(process.argv[2] ?? 90);
const end = Date.parse(DEFAULT_DEMO_END);
const fleet = demoFleet(end);
let rings = 0, readings = 0;
const t0 = performance.now();
for (const unit of fleet) {
  const batch = simulateUnit(unit, { from: end - days * DAY_MS, to: end, seed: 1 }).batch();
  rings += batch.count;
  readings += batch.exhaustC.length;
}
const batchS = (performance.now() - t0) / 1000;
const t1 = performance.now();
let objects = 0;
for (const ring of simulateUnit(fleet[0], { from: end - Math.min(days, 30) * DAY_MS, to: end, seed: 1 }).rings()) objects += ring.exhaustC.length > 0 ? 1 : 0;
const iterS = (performance.now() - t1) / 1000;
process.stdout.write(`${fleet.length} units, ${days} days: ${rings} rings (${readings} readings) in ${batchS.toFixed(2)} s as batches\n`);
process.stdout.write(JSON.stringify({ bench: 'sim', units: fleet.length, days, rings, batchRingsPerS: Math.round(rings / batchS), iteratorRingsPerS: Math.round(objects / iterS) }) + '\n');
