/**
 * `cansight demo --scenario NAME --out FILE [--days N] [--seed S] [--unit ID] [--end TIME]
 * [--steady-interval SECONDS]`: writes a simulated scenario as NDJSON (one ring per line, with
 * unitId; rings of all units in time order) or CSV (one unit per file; header
 * ts,load_mw,ambient_c,ambient_kpa,speed_pct,tc1,...,tcM,fuel_flow_kg_s,flame_detected), chosen by
 * the file's extension, with two files beside it: the ground truth (faults, starts, stops, trips)
 * as FILE.truth.json and the units as FILE.unit.json (the body of POST /v1/units for one unit, an
 * array of such bodies for several), which `cansight import --register` reads.
 *
 * The rings cover the --days before the end, the end included: --end when given, else the
 * current time rounded down to the ring grid (a multiple of the steady interval and of a whole
 * second since 1970), so the last ring is at the end time and never in the future. The same
 * --seed and --end write the same files. Exit codes: 0 written, 1 failed while writing, 2 wrong
 * usage.
 */
import { createWriteStream, type WriteStream } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { parseArgs } from 'node:util';
import { buildScenario, scenarioNames } from '../sim/scenarios.ts';
import { isoTime, simulateUnit, type UnitSimulation } from '../sim/generator.ts';
import { mergeByTime } from '../sim/merge.ts';
import { parseRfc3339 } from '../ingest/validate.ts';
import { commandHelp, COMMANDS, wantsHelp } from './usage.ts';

const DEMO_USAGE = commandHelp(COMMANDS.demo);

class DemoUsageError extends Error {}

function positiveNumber(raw: string | undefined, option: string, integer: boolean): number | undefined {
  if (raw === undefined) return undefined;
  const v = Number(raw);
  if (!Number.isFinite(v) || v <= 0 || (integer && !Number.isInteger(v))) {
    throw new DemoUsageError(`--${option} must be a positive ${integer ? 'whole number' : 'number'}, got "${raw}"`);
  }
  return v;
}

async function write(stream: WriteStream, chunk: string): Promise<void> {
  if (!stream.write(chunk)) await new Promise<void>((resolve) => stream.once('drain', resolve));
}

async function close(stream: WriteStream): Promise<void> {
  await new Promise<void>((resolve, reject) => {
    stream.once('error', reject);
    stream.end(resolve);
  });
}

const DEFAULT_STEADY_INTERVAL_S = 60;
/** Ring interval of the simulator during starts, stops and trips, ms. */
const TRANSIENT_MS = 1000;

function gcd(a: number, b: number): number {
  while (b) [a, b] = [b, a % b];
  return a;
}

/**
 * The ring grid, ms: every ring time of the simulator is a multiple of the steady interval or
 * of one second since 1970, so an end on a multiple of both has a ring at that very time.
 */
function ringGridMs(steadyIntervalS: number): number {
  const steadyMs = Math.max(1, Math.round(steadyIntervalS * 1000));
  return (steadyMs / gcd(steadyMs, TRANSIENT_MS)) * TRANSIENT_MS;
}

/** The end of the window, ms since 1970: --end as given, or now rounded down to the ring grid. */
function windowEndMs(raw: string | undefined, gridMs: number, nowMs: number): number {
  if (raw === undefined) return Math.floor(nowMs / gridMs) * gridMs;
  const parsed = parseRfc3339(raw);
  if (typeof parsed === 'string') {
    throw new DemoUsageError(`--end "${raw}" ${parsed}; give the last ring's time as RFC 3339 with an offset, e.g. 2026-03-01T00:00:00Z, or leave --end out to end at the current time`);
  }
  return parsed;
}

function csvNumber(x: number | null): string {
  return x === null || Number.isNaN(x) ? '' : String(x);
}

/** `nowMs` is the time the window ends at when --end is not given (default: the clock). */
export async function demoCommand(args: string[], nowMs: number = Date.now()): Promise<number> {
  const err = (line: string) => process.stderr.write(`cansight demo: ${line}\n`);
  let values: Record<string, string | boolean | undefined>;
  if (wantsHelp(args)) {
    process.stdout.write(DEMO_USAGE + '\n');
    return 0;
  }
  try {
    ({ values } = parseArgs({ args, options: COMMANDS.demo.options, strict: true, allowPositionals: false }));
  } catch (e) {
    err(`${(e as Error).message}\n\n${DEMO_USAGE}`);
    return 2;
  }
  let plan: { scenario: ReturnType<typeof buildScenario>; sims: UnitSimulation[]; out: string; format: 'ndjson' | 'csv'; seed: number };
  try {
    const name = values.scenario as string | undefined;
    const out = values.out as string | undefined;
    if (!name) throw new DemoUsageError(`--scenario is required; choose one of: ${scenarioNames().join(', ')}`);
    if (!out) throw new DemoUsageError('--out FILE is required (a .ndjson, .jsonl or .csv file)');
    const lower = out.toLowerCase();
    const format = lower.endsWith('.csv') ? 'csv' : lower.endsWith('.ndjson') || lower.endsWith('.jsonl') ? 'ndjson' : null;
    if (!format) throw new DemoUsageError(`--out "${out}": the file name must end in .ndjson, .jsonl or .csv (that chooses the format)`);
    const days = positiveNumber(values.days as string | undefined, 'days', false);
    const seedRaw = values.seed as string | undefined;
    const seed = seedRaw === undefined ? 1 : Number(seedRaw);
    if (!Number.isInteger(seed) || seed < 0 || seed > 0xffffffff) throw new DemoUsageError(`--seed must be a whole number from 0 to 4294967295, got "${seedRaw}"`);
    const steady = positiveNumber(values['steady-interval'] as string | undefined, 'steady-interval', false);
    const end = windowEndMs(values.end as string | undefined, ringGridMs(steady ?? DEFAULT_STEADY_INTERVAL_S), nowMs);
    const scenario = buildScenario(name, { days, end });
    if (scenario.from < 0) {
      throw new DemoUsageError(`--end "${values.end}" is too early: the ${(scenario.to - scenario.from) / 86_400_000} days before it start before 1970-01-01T00:00:00Z, where rings cannot be stored; give a later --end or fewer --days`);
    }
    let units = scenario.units;
    const unitId = values.unit as string | undefined;
    if (unitId !== undefined) {
      units = units.filter((u) => u.config.id === unitId);
      if (!units.length) throw new DemoUsageError(`--unit "${unitId}" is not in scenario "${name}"; its units are: ${scenario.units.map((u) => u.config.id).join(', ')}`);
    }
    if (format === 'csv' && units.length > 1) {
      throw new DemoUsageError(`a CSV file holds one unit and scenario "${name}" has ${units.length}: pass --unit (one of ${units.map((u) => u.config.id).join(', ')}) or write .ndjson`);
    }
    // The simulator's window leaves its end out; one millisecond more takes in a ring at the end.
    const sims = units.map((u) => simulateUnit(u, { from: scenario.from, to: scenario.to + 1, seed, steadyIntervalS: steady }));
    plan = { scenario, sims, out, format, seed };
  } catch (e) {
    if (e instanceof DemoUsageError || /unknown scenario|days must be/.test((e as Error).message)) {
      err(`${(e as Error).message}\n\n${DEMO_USAGE}`);
      return 2;
    }
    err((e as Error).message);
    return 1;
  }

  const { scenario, sims, out, format, seed } = plan;
  const unitFile = `${out}.unit.json`;
  let count = 0;
  let lastTs: string | null = null;
  try {
    const stream = createWriteStream(out);
    const opened = new Promise<void>((resolve, reject) => { stream.once('open', () => resolve()); stream.once('error', reject); });
    await opened;
    let buf = '';
    const flushAt = 1 << 20;
    if (format === 'ndjson') {
      for (const ring of mergeByTime(sims)) {
        buf += JSON.stringify(ring) + '\n';
        lastTs = ring.ts;
        count++;
        if (buf.length > flushAt) { await write(stream, buf); buf = ''; }
      }
    } else {
      const sim = sims[0];
      const m = sim.m;
      const tcs = Array.from({ length: m }, (_, i) => `tc${i + 1}`).join(',');
      buf += `ts,load_mw,ambient_c,ambient_kpa,speed_pct,${tcs},fuel_flow_kg_s,flame_detected\n`;
      for (const r of sim.rings()) {
        buf += `${r.ts},${r.loadMw},${r.ambientC},${r.ambientKPa},${r.speedPct},${r.exhaustC.map(csvNumber).join(',')},${r.fuelFlowKgS},${r.flameDetected ? 'true' : 'false'}\n`;
        lastTs = r.ts;
        count++;
        if (buf.length > flushAt) { await write(stream, buf); buf = ''; }
      }
    }
    if (buf) await write(stream, buf);
    await close(stream);
    const from = isoTime(scenario.from);
    const to = isoTime(scenario.to);
    const truth = {
      scenario: scenario.name,
      description: scenario.description,
      seed,
      from,
      to,
      lastRing: lastTs,
      format,
      rings: count,
      numbering: 'chambers and thermocouples are numbered from 1',
      units: sims.map((s) => ({ ...s.truth, from, to })),
    };
    await writeFile(`${out}.truth.json`, JSON.stringify(truth, null, 2) + '\n');
    // Each unit as POST /v1/units takes it: id, name, site and the configuration Cansight is told.
    const bodies = sims.map((s) => s.unit.config);
    await writeFile(unitFile, JSON.stringify(bodies.length === 1 ? bodies[0] : bodies, null, 2) + '\n');
  } catch (e) {
    err(`could not write ${out}: ${(e as Error).message}`);
    return 1;
  }
  process.stdout.write(
    `wrote ${count} rings of ${sims.length} unit${sims.length === 1 ? '' : 's'} (scenario ${scenario.name}, last ring at ${lastTs ?? 'none'}) to ${out}; ` +
      `ground truth in ${out}.truth.json, unit${sims.length === 1 ? '' : 's'} in ${unitFile}\n` +
      `load them: cansight import --register ${unitFile} ${out}\n`,
  );
  return 0;
}
