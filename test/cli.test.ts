/**
 * The `cansight` command as a person runs it: child processes of bin/cansight.mjs.
 */
import { afterAll, describe, expect, it, vi } from 'vitest';
import { createHash } from 'node:crypto';
import { execFile, spawn } from 'node:child_process';
import { existsSync } from 'node:fs';
import { mkdtemp, chmod, readdir, readFile, rm, writeFile } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { promisify } from 'node:util';
import { createTestDatabase, type TestDatabase } from './helpers/db.ts';
import { freePort } from '../services/db/embedded.ts';
import { COMMANDS } from '../services/cli/usage.ts';
import { main } from '../services/cli/main.ts';

const run = promisify(execFile);
const BIN = fileURLToPath(new URL('../bin/cansight.mjs', import.meta.url));
const CLI_DIR = fileURLToPath(new URL('../services/cli/', import.meta.url));
const dbs: TestDatabase[] = [];
const dirs: string[] = [];
afterAll(async () => {
  for (const d of dbs) await d.drop();
  for (const d of dirs) await rm(d, { recursive: true, force: true });
});

function cli(args: string[], env: Record<string, string>) {
  return run(process.execPath, [BIN, ...args], { env: { ...process.env, LOG_LEVEL: 'warn', ...env } }).then(
    (r) => ({ code: 0, stdout: r.stdout, stderr: r.stderr }),
    (e) => ({ code: e.code as number, stdout: e.stdout as string, stderr: e.stderr as string }),
  );
}

describe('cansight command', () => {
  it('creates, lists and revokes keys; a revoked key no longer opens the API', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const env = { DATABASE_URL: db.url };
    const created = await cli(['keys', 'create', '--role', 'viewer', '--units', 'a-1,b-2', '--label', 'control room'], env);
    expect(created.code).toBe(0);
    const key = /csk_[A-Za-z0-9_-]+/.exec(created.stdout)?.[0];
    expect(key).toBeDefined();
    const { rows } = await db.pool.query('SELECT role, unit_ids, key_hash FROM api_keys');
    expect(rows).toHaveLength(1);
    expect(rows[0]).toMatchObject({ role: 'viewer', unit_ids: ['a-1', 'b-2'] });
    expect(JSON.stringify(rows)).not.toContain(key!.slice(4));
    // Keys are listed and revoked by their key id: "key-" and 12 hex digits of the key's SHA-256.
    const keyId = 'key-' + createHash('sha256').update(key!).digest('hex').slice(0, 12);
    const listed = await cli(['keys', 'list'], env);
    expect(listed.stdout).toContain(keyId);
    expect(listed.stdout).not.toContain(key!.slice(0, 10));
    const revoked = await cli(['keys', 'revoke', keyId], env);
    expect(revoked.code).toBe(0);
    const again = await cli(['keys', 'revoke', keyId], env);
    expect(again.code).toBe(1);
    const { rows: after } = await db.pool.query('SELECT revoked_at FROM api_keys');
    expect(after[0].revoked_at).not.toBeNull();
  });

  it('refuses a bad role and an unknown command with exit 2 and a message', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const bad = await cli(['keys', 'create', '--role', 'superuser'], { DATABASE_URL: db.url });
    expect(bad.code).toBe(2);
    expect(bad.stderr).toContain('superuser');
    const unknown = await cli(['frobnicate'], { DATABASE_URL: db.url });
    expect(unknown.code).toBe(2);
    expect(unknown.stderr).toContain('frobnicate');
  });

  it('stops at once on a bad configuration value, naming the variable', async () => {
    const bad = await cli(['migrate'], { PORT: 'eighty', DATABASE_URL: 'postgres://x@127.0.0.1:1/x' });
    expect(bad.code).toBe(2);
    expect(bad.stderr).toContain('PORT');
    expect(bad.stderr).toContain('eighty');
    const url = await cli(['migrate'], { DATABASE_URL: 'mysql://x' });
    expect(url.code).toBe(2);
    expect(url.stderr).toContain('DATABASE_URL');
  });

  it('every sub-command answers --help with each option its parser accepts, without opening a database', async () => {
    const top = await cli(['--help'], { DATABASE_URL: 'postgres://nobody@127.0.0.1:1/nothing' });
    expect(top.code).toBe(0);
    // Each sub-command through the dispatcher in this process (a database opened would fail: none is set up).
    const specs = Object.values(COMMANDS);
    const each: { code: number; stdout: string; stderr: string }[] = [];
    const saved = { url: process.env.DATABASE_URL, exitCode: process.exitCode };
    process.env.DATABASE_URL = 'postgres://nobody@127.0.0.1:1/nothing';
    try {
      for (const c of specs) {
        let stdout = '';
        let stderr = '';
        const o = vi.spyOn(process.stdout, 'write').mockImplementation((b: string | Uint8Array) => ((stdout += String(b)), true));
        const e = vi.spyOn(process.stderr, 'write').mockImplementation((b: string | Uint8Array) => ((stderr += String(b)), true));
        process.exitCode = undefined;
        try {
          await main([...c.name.split(' '), '--help']);
        } finally {
          o.mockRestore();
          e.mockRestore();
        }
        each.push({ code: Number(process.exitCode ?? 0), stdout, stderr });
      }
    } finally {
      if (saved.url === undefined) delete process.env.DATABASE_URL;
      else process.env.DATABASE_URL = saved.url;
      process.exitCode = saved.exitCode;
    }
    specs.forEach((c, i) => {
      const help = each[i];
      expect(help.code, `${c.name}: ${help.stderr}`).toBe(0);
      expect(help.stdout).toMatch(new RegExp(`^usage: cansight ${c.name}`));
      for (const option of Object.keys(c.options)) {
        expect(help.stdout, `cansight ${c.name} --help`).toMatch(new RegExp(`^  --${option}\\b`, 'm'));
        expect(top.stdout, `cansight --help, ${c.name}`).toContain(`--${option}`);
      }
      expect(top.stdout).toContain(`cansight ${c.name}`);
    });
    // Options and their help come from one table: every parser of the command reads its options there.
    const sources = (await readdir(CLI_DIR)).filter((f) => f.endsWith('.ts'));
    let parsers = 0;
    for (const f of sources) {
      for (const m of (await readFile(path.join(CLI_DIR, f), 'utf8')).matchAll(/parseArgs\(\{[^)]*?options: ([^,}]+)/g)) {
        parsers++;
        expect(m[1], `${f}: ${m[0]}`).toMatch(/^(COMMANDS[.[]|spec\.options)/);
      }
    }
    expect(parsers).toBeGreaterThanOrEqual(specs.length);
  });

  it('refuses an unknown option before opening a database, with that command\'s help', async () => {
    const bad = await cli(['report', '--unit', 'hp-1', '--out', 'x.html', '--colour', 'red'], { DATABASE_URL: 'postgres://nobody@127.0.0.1:1/nothing' });
    expect(bad.code).toBe(2);
    expect(bad.stderr).toContain("Unknown option '--colour'");
    expect(bad.stderr).toContain('usage: cansight report --unit U --out FILE.html');
  });

  it('demo, then import --register, on an empty database: the unit is registered as the file says and the rings land up to now', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const env = { DATABASE_URL: db.url };
    const dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-demo-import-'));
    dirs.push(dir);
    const out = path.join(dir, 'healthy.csv');
    const before = Date.now();
    const demo = await cli(['demo', '--scenario', 'healthy', '--days', '1', '--out', out], env);
    expect(demo.code, demo.stderr).toBe(0);
    expect(demo.stdout).toContain(`load them: cansight import --register ${out}.unit.json ${out}`);
    const truth = JSON.parse(await readFile(`${out}.truth.json`, 'utf8'));
    const body = JSON.parse(await readFile(`${out}.unit.json`, 'utf8'));
    expect((await db.pool.query('SELECT count(*)::int AS n FROM units')).rows[0].n).toBe(0);

    const imported = await cli(['import', '--register', `${out}.unit.json`, out], env);
    expect(imported.code, imported.stderr).toBe(0);
    expect(imported.stdout.trim().split('\n')).toEqual([
      'registered unit sim-healthy (Healthy unit, Harbour Point) from healthy.csv.unit.json',
      `healthy.csv: accepted ${truth.rings}, duplicates 0, rejected 0`,
    ]);
    const { rows: units } = await db.pool.query(`SELECT u.name, u.site, v.version, v.config FROM units u JOIN unit_config_versions v ON v.unit_id = u.id WHERE u.id = 'sim-healthy'`);
    const { id: _, name, site, ...config } = body;
    expect(units).toEqual([{ name, site, version: 1, config }]);
    const { rows: [span] } = await db.pool.query(`SELECT count(*)::int AS n, max(ts) AS last FROM rings WHERE unit_id = 'sim-healthy'`);
    expect(span.n).toBe(truth.rings);
    expect(span.last.toISOString().replace('.000Z', 'Z')).toBe(truth.lastRing);
    expect(span.last.getTime() % 60_000).toBe(0);
    expect(span.last.getTime()).toBeGreaterThan(before - 60_000);
    expect(span.last.getTime()).toBeLessThanOrEqual(Date.now());

    const again = await cli(['import', '--register', `${out}.unit.json`, out], env);
    expect(again.code, again.stderr).toBe(0);
    expect(again.stdout).toContain('unit sim-healthy is already registered with the configuration in healthy.csv.unit.json');
    expect(again.stdout).toContain(`healthy.csv: accepted 0, duplicates ${truth.rings}, rejected 0`);

    await writeFile(`${out}.unit.json`, JSON.stringify({ ...body, thermocouples: { count: 16, firstAngleDeg: 10 } }));
    const changed = await cli(['import', '--register', `${out}.unit.json`, out], env);
    expect(changed.code).toBe(1);
    expect(changed.stderr).toContain('unit sim-healthy is already registered and differs from');
    expect(changed.stderr).toContain('thermocouples.count registered 20, in the file 16');
    expect((await db.pool.query(`SELECT count(*)::int AS n FROM unit_config_versions WHERE unit_id = 'sim-healthy'`)).rows[0].n).toBe(1);

    // Several units in one NDJSON file, ending at a chosen time.
    const end = new Date(Math.floor(before / 60_000) * 60_000 - 86_400_000).toISOString().replace('.000Z', 'Z');
    const fleet = path.join(dir, 'fleet.ndjson');
    expect((await cli(['demo', '--scenario', 'fleet', '--days', '1', '--end', end, '--out', fleet], env)).code).toBe(0);
    const fleetImport = await cli(['import', '--register', `${fleet}.unit.json`, fleet], env);
    expect(fleetImport.code, fleetImport.stderr).toBe(0);
    expect(fleetImport.stdout).toMatch(/^registered unit hp-1 \(Harbour Point unit 1, Harbour Point\) from fleet\.ndjson\.unit\.json$/m);
    expect(fleetImport.stdout).toMatch(/^fleet\.ndjson: accepted \d+, duplicates 0, rejected 0$/m);
    const { rows: last } = await db.pool.query(`SELECT unit_id, max(ts) AS last FROM rings WHERE unit_id <> 'sim-healthy' GROUP BY unit_id ORDER BY unit_id`);
    expect(last.map((r) => [r.unit_id, r.last.toISOString().replace('.000Z', 'Z')])).toEqual(['hp-1', 'hp-2', 'kf-1', 'kf-2', 'mr-1', 'mr-2'].map((id) => [id, end]));
  });

  it('start on the embedded default answers /health, prints the URL and a first admin key, keeps the log JSON on a stdout that is not a terminal, and stops cleanly on SIGTERM', async () => {
    const dir = await mkdtemp(path.join(os.tmpdir(), 'cansight-start-'));
    await chmod(dir, 0o777);
    dirs.push(dir);
    const port = await freePort();
    const env: Record<string, string> = { ...(process.env as Record<string, string>), CANSIGHT_DATA_DIR: path.join(dir, 'pg'), PORT: String(port), CANSIGHT_PG_PORT: String(await freePort()), LOG_LEVEL: 'info' };
    delete env.DATABASE_URL;
    delete env.LOG_FORMAT;
    const child = spawn(process.execPath, [BIN, 'start'], { env, stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    child.stdout.on('data', (b) => (out += b));
    child.stderr.on('data', (b) => (out += b));
    const exited = new Promise<number | null>((r) => child.on('exit', (code) => r(code)));
    try {
      let health: Response | undefined;
      for (let i = 0; i < 300 && !health; i++) {
        await new Promise((r) => setTimeout(r, 100));
        health = await fetch(`http://127.0.0.1:${port}/health`).catch(() => undefined);
      }
      expect(health?.status).toBe(200);
      await new Promise((r) => setTimeout(r, 200));
      expect(out).toContain(`http://127.0.0.1:${port}`);
      const key = /admin key[^:]*: (csk_[A-Za-z0-9_-]+)/.exec(out)?.[1];
      expect(key, out).toBeDefined();
      const units = await fetch(`http://127.0.0.1:${port}/v1/units`, { headers: { authorization: `Bearer ${key}` } });
      expect(units.status).toBe(200);
      expect(((await units.json()) as { units: unknown[] }).units.length).toBeGreaterThanOrEqual(2);
    } finally {
      child.kill('SIGTERM');
    }
    expect(await exited).toBe(0);
    expect(out).not.toMatch(/"level":(50|60)/);
    // Not a terminal: every log line is JSON beside the header's plain lines, with no progress line and no log file.
    const lines = out.split('\n').filter(Boolean);
    const json = lines.filter((l) => l.startsWith('{')).map((l) => JSON.parse(l) as { msg: string });
    expect(json.map((l) => l.msg)).toEqual(expect.arrayContaining(['embedded PostgreSQL started', 'listening', 'stopping']));
    expect(lines.filter((l) => !l.startsWith('{')).map((l) => l.split(':')[0])).toEqual(['Cansight is running at http', 'admin key (shown once, store it now)', 'data', "Cansight advises; the turbine's own protection and the site's procedures govern. Stop with Ctrl-C."]);
    expect(out).not.toMatch(/\r|demo history:/);
    expect(existsSync(path.join(dir, 'cansight.log'))).toBe(false);
  });
});
