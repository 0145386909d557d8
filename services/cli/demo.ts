/**
 * `cansight demo --scenario NAME --out FILE [--days N] [--seed S] [--unit ID] [--end TIME]
 * [--steady-interval SECONDS]`: writes a simulated scenario as NDJSON (one ring per line, with
 * unitId; rings of all units in time order) or CSV (one unit per file; header
 * ts,load_mw,ambient_c,ambient_kpa,speed_pct,tc1,...,tcM,fuel_flow_kg_s,flame_detected), chosen by
 * the file's extension, and the ground truth (faults, starts, stops, trips) beside it as
 * FILE.truth.json. Exit codes: 0 written, 1 failed while writing, 2 wrong usage.
 */
import { createWriteStream, type WriteStream } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { parseArgs } from 'node:util';
import { buildScenario, scenarioNames, SCENARIOS } from '../sim/scenarios.ts';
import { simulateUnit, type UnitSimulation } from '../sim/generator.ts';
import { mergeByTime } from '../sim/merge.ts';

const DEMO_USAGE = `usage: cansight demo --scenario NAME --out FILE [--days N] [--seed S] [--unit ID]
                     [--end TIME] [--steady-interval SECONDS]
  FILE ending .ndjson or .jsonl: one ring per line with unitId; .csv: one unit per file.
  The ground truth is written beside it as FILE.truth.json.
scenarios:
${Object.entries(SCENARIOS).map(([k, v]) => `  ${k.padEnd(12)} ${v.description}`).join('\n')}`;

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

function csvNumber(x: number | null): string {
  return x === null || Number.isNaN(x) ? '' : String(x);
}

export async function demoCommand(args: string[]): Promise<number> {
  const err = (line: string) => process.stderr.write(`cansight demo: ${line}\n`);
  let values: Record<string, string | boolean | undefined>;
  try {
    ({ values } = parseArgs({
      args,
      options: {
        scenario: { type: 'string' }, out: { type: 'string' }, days: { type: 'string' }, seed: { type: 'string' },
        unit: { type: 'string' }, end: { type: 'string' }, 'steady-interval': { type: 'string' }, help: { type: 'boolean' },
      },
      strict: true,
      allowPositionals: false,
    }));
  } catch (e) {
    err(`${(e as Error).message}\n\n${DEMO_USAGE}`);
    return 2;
  }
  if (values.help) {
    process.stdout.write(DEMO_USAGE + '\n');
    return 0;
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
    const end = values.end as string | undefined;
    if (end !== undefined && !Number.isFinite(Date.parse(end))) throw new DemoUsageError(`--end "${end}" is not a time; use RFC 3339, e.g. 2026-03-01T00:00:00Z`);
    const scenario = buildScenario(name, { days, end });
    let units = scenario.units;
    const unitId = values.unit as string | undefined;
    if (unitId !== undefined) {
      units = units.filter((u) => u.config.id === unitId);
      if (!units.length) throw new DemoUsageError(`--unit "${unitId}" is not in scenario "${name}"; its units are: ${scenario.units.map((u) => u.config.id).join(', ')}`);
    }
    if (format === 'csv' && units.length > 1) {
      throw new DemoUsageError(`a CSV file holds one unit and scenario "${name}" has ${units.length}: pass --unit (one of ${units.map((u) => u.config.id).join(', ')}) or write .ndjson`);
    }
    const sims = units.map((u) => simulateUnit(u, { from: scenario.from, to: scenario.to, seed, steadyIntervalS: steady }));
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
  let count = 0;
  try {
    const stream = createWriteStream(out);
    const opened = new Promise<void>((resolve, reject) => { stream.once('open', () => resolve()); stream.once('error', reject); });
    await opened;
    let buf = '';
    const flushAt = 1 << 20;
    if (format === 'ndjson') {
      for (const ring of mergeByTime(sims)) {
        buf += JSON.stringify(ring) + '\n';
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
        count++;
        if (buf.length > flushAt) { await write(stream, buf); buf = ''; }
      }
    }
    if (buf) await write(stream, buf);
    await close(stream);
    const truth = {
      scenario: scenario.name,
      description: scenario.description,
      seed,
      from: new Date(scenario.from).toISOString(),
      to: new Date(scenario.to).toISOString(),
      format,
      rings: count,
      numbering: 'chambers and thermocouples are numbered from 1',
      units: sims.map((s) => s.truth),
    };
    await writeFile(`${out}.truth.json`, JSON.stringify(truth, null, 2) + '\n');
  } catch (e) {
    err(`could not write ${out}: ${(e as Error).message}`);
    return 1;
  }
  process.stdout.write(`wrote ${count} rings of ${sims.length} unit${sims.length === 1 ? '' : 's'} (scenario ${scenario.name}) to ${out}; ground truth in ${out}.truth.json\n`);
  return 0;
}
