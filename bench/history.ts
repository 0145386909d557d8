/**
 * History benchmark: a unit-year at one ring a minute (the `plugging-year` scenario: a base-load
 * unit whose chamber 4 plugs over two weeks in its last quarter), written by `cansight demo`
 * and loaded by `cansight import --wait`, against one database (DATABASE_URL if set, else an
 * embedded PostgreSQL in a temporary directory) with one `cansight worker` process:
 *   (a) plain backfill: the year imported for one unit and analysed once (the automatic first
 *       baseline, drift day by day, the alert rules): rings per second from the first byte sent
 *       to the unit caught up;
 *   (b) history: the same year for a second unit, then a baseline requested over its first
 *       month, so every ring after that month is judged again: rings per second from the first
 *       byte sent to the status saying the re-analysis is done;
 * and the ratio (b)/(a). Goal: ≥ 0.4 (the re-analysis and drift cost less than one more pass),
 * with the plugging chamber alerted on the right chamber. The last line printed is one JSON
 * object.
 *
 *   npm run bench:history     BENCH_DAYS (default 365)
 */
import { spawn } from 'node:child_process';
import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { startThrowawayPostgres } from '../services/db/embedded.ts';
import { createLogger } from '../services/db/logger.ts';
import { migrate } from '../services/db/migrate.ts';
import { createPool, type Pool } from '../services/db/pool.ts';
import { insertBaselineRequest } from '../services/db/baselines.ts';

const DAYS = Number(process.env.BENCH_DAYS ?? 365);
const END = '2026-01-01T00:00:00Z';
const BIN = fileURLToPath(new URL('../bin/cansight.mjs', import.meta.url));
const say = (line: string) => process.stderr.write(line + '\n');

function run(args: string[], env: Record<string, string>): Promise<void> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, [BIN, ...args], { env: { ...process.env, LOG_LEVEL: 'warn', ...env }, stdio: ['ignore', 'ignore', 'pipe'] });
    let err = '';
    child.stderr.on('data', (d: Buffer) => (err = (err + d.toString()).slice(-4000)));
    child.once('exit', (code) => (code === 0 ? resolve() : reject(new Error(`cansight ${args[0]} exited ${code}: ${err}`))));
  });
}

async function until(check: () => Promise<boolean>, pollMs = 250): Promise<void> {
  while (!(await check())) await new Promise((r) => setTimeout(r, pollMs));
}

/** Analysis has reached the unit's last ring with no re-analysis asked or running. */
async function caughtUp(pool: Pool, unitId: string): Promise<boolean> {
  const { rows } = await pool.query(
    `SELECT p.watermark_ts = (SELECT max(ts) FROM rings WHERE unit_id = $1) AND p.reanalyse_from IS NULL AND p.reanalysis_to IS NULL AS done
       FROM analysis_progress p WHERE p.unit_id = $1`,
    [unitId],
  );
  return rows[0]?.done === true;
}

async function main(): Promise<void> {
  const dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-bench-history-'));
  const server = process.env.DATABASE_URL ? null : await startThrowawayPostgres('cansight-bench-history', createLogger('warn'));
  const url = process.env.DATABASE_URL ?? (server as NonNullable<typeof server>).url;
  const pool = createPool(url, { max: 4, statementTimeoutMs: 600_000 });
  const env = { DATABASE_URL: url };
  let worker: ReturnType<typeof spawn> | null = null;
  try {
    await migrate(pool);
    const file = path.join(dir, 'year.ndjson');
    const t0 = performance.now();
    await run(['demo', '--scenario', 'plugging-year', '--days', String(DAYS), '--end', END, '--out', file], {});
    say(`wrote ${DAYS} days of rings in ${((performance.now() - t0) / 1000).toFixed(1)} s`);
    // Two units with the same rings: the unit file as written, and a copy under another id.
    const unitFile = JSON.parse(await readFile(`${file}.unit.json`, 'utf8')) as Array<{ id: string }> | { id: string };
    const units = Array.isArray(unitFile) ? unitFile : [unitFile];
    const fileFor = async (id: string) => {
      const f = path.join(dir, `${id}.unit.json`);
      await writeFile(f, JSON.stringify(units.map((u) => ({ ...u, id }))));
      return f;
    };
    worker = spawn(process.execPath, [BIN, 'worker'], { env: { ...process.env, LOG_LEVEL: 'warn', ...env, CANSIGHT_WORKER_ID: 'bench-history' }, stdio: ['ignore', 'ignore', 'inherit'] });

    const importAndWait = async (id: string) => {
      await run(['import', '--register', await fileFor(id), '--unit', id, '--wait', file], env);
      await until(() => caughtUp(pool, id));
    };
    // (a) plain backfill.
    const a0 = performance.now();
    await importAndWait('year-plain');
    const plainS = (performance.now() - a0) / 1000;
    const rings = Number((await pool.query(`SELECT count(*)::bigint AS n FROM rings WHERE unit_id = 'year-plain'`)).rows[0].n);
    say(`(a) plain backfill: ${rings.toLocaleString('en')} rings imported and analysed in ${plainS.toFixed(1)} s`);

    // (b) history: the import, then a refit over the first month, judged again.
    const b0 = performance.now();
    await importAndWait('year-history');
    const importedS = (performance.now() - b0) / 1000;
    const first = (await pool.query(`SELECT min(ts) AS t FROM rings WHERE unit_id = 'year-history'`)).rows[0].t as Date;
    // The first month (a twelfth of a shorter run).
    await insertBaselineRequest(pool, 'year-history', first.getTime(), first.getTime() + Math.min(30, DAYS / 12) * 86_400_000, 'bench');
    await until(async () => (await pool.query(`SELECT state FROM baseline_requests WHERE unit_id = 'year-history'`)).rows[0].state !== 'pending');
    await until(() => caughtUp(pool, 'year-history'));
    const historyS = (performance.now() - b0) / 1000;
    const rerun = Number((await pool.query(`SELECT coalesce(sum(rings), 0)::bigint AS n FROM analysis_batches WHERE unit_id = 'year-history' AND kind = 'rerun'`)).rows[0].n);
    say(`(b) history: imported in ${importedS.toFixed(1)} s, refitted over the first month and ${rerun.toLocaleString('en')} rings judged again; ${historyS.toFixed(1)} s in all`);

    const alerts = (await pool.query(`SELECT kind, chamber, thermocouple, grade FROM alerts WHERE unit_id = 'year-history' AND kind <> 'unit_silent' ORDER BY raised_at`)).rows as Array<{ kind: string; chamber: number | null; thermocouple: number | null; grade: string }>;
    const chamber4 = alerts.some((x) => x.chamber === 4 && (x.kind === 'chamber_cold' || x.kind === 'chamber_drift'));
    for (const x of alerts) say(`  alert ${x.kind} ${x.chamber !== null ? `chamber ${x.chamber}` : x.thermocouple !== null ? `thermocouple ${x.thermocouple}` : ''} ${x.grade}`);
    const backfillRingsPerS = rings / plainS;
    const historyRingsPerS = rings / historyS;
    const ratio = historyRingsPerS / backfillRingsPerS;
    say(`backfill ${Math.round(backfillRingsPerS)} rings/s, history ${Math.round(historyRingsPerS)} rings/s, ratio ${ratio.toFixed(2)} (goal ≥ 0.4); plugging chamber 4 alerted: ${chamber4 ? 'yes' : 'no'}`);
    console.log(
      JSON.stringify({
        bench: 'history',
        rings,
        totalS: Number(historyS.toFixed(1)),
        plainS: Number(plainS.toFixed(1)),
        rerunRings: rerun,
        backfillRingsPerS: Math.round(backfillRingsPerS),
        historyRingsPerS: Math.round(historyRingsPerS),
        ratio: Number(ratio.toFixed(3)),
        alerts: alerts.length,
        pluggingChamberAlerted: chamber4,
      }),
    );
  } finally {
    worker?.kill('SIGTERM');
    await new Promise((r) => setTimeout(r, 500));
    await pool.end();
    await server?.stop();
    await rm(dir, { recursive: true, force: true });
  }
}

await main();
