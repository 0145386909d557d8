import { afterAll, describe, expect, it } from 'vitest';
import { createEmptyDatabase, createTestDatabase, type TestDatabase } from './helpers/db.ts';
import { migrate, migrationsCurrent, readMigrations } from '../services/db/migrate.ts';
import { createPool } from '../services/db/pool.ts';

const dbs: TestDatabase[] = [];
afterAll(async () => {
  for (const d of dbs) await d.drop();
});

describe('migration runner', () => {
  it('applies every migration from empty, in order, once; a re-run is a no-op', async () => {
    const db = await createEmptyDatabase();
    dbs.push(db);
    const files = await readMigrations();
    expect(await migrationsCurrent(db.pool)).toBe(false);
    const first = await migrate(db.pool);
    expect(first).toEqual(files.map((m) => m.id));
    expect(await migrationsCurrent(db.pool)).toBe(true);
    const second = await migrate(db.pool);
    expect(second).toEqual([]);
    const { rows } = await db.pool.query('SELECT id FROM schema_migrations ORDER BY id');
    expect(rows.map((r) => r.id)).toEqual(files.map((m) => m.id));
  });

  it('is safe when two runners start at the same moment: each migration applied exactly once', async () => {
    const db = await createEmptyDatabase();
    dbs.push(db);
    const other = createPool(db.url, { max: 2 });
    try {
      const [a, b] = await Promise.all([migrate(db.pool), migrate(other)]);
      const files = await readMigrations();
      expect([...a, ...b].sort((x, y) => x - y)).toEqual(files.map((m) => m.id));
      expect(a.length === 0 || b.length === 0).toBe(true);
      const { rows } = await db.pool.query('SELECT count(*)::int AS n FROM schema_migrations');
      expect(rows[0].n).toBe(files.length);
    } finally {
      await other.end();
    }
  });

  it('makes ring partitions on demand for old imports, concurrently', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const calls = Array.from({ length: 4 }, () => db.pool.query(`SELECT ensure_ring_partitions('2011-01-15Z', '2011-03-02Z') AS made`));
    const made = (await Promise.all(calls)).reduce((s, r) => s + Number(r.rows[0].made), 0);
    expect(made).toBe(3);
    await db.pool.query(`INSERT INTO rings (unit_id, ts, load_mw, ambient_c, ambient_kpa, speed_pct, exhaust_c) VALUES ('u', '2011-02-01T00:00:00Z', 1, 2, 100, 100, '{500,501}')`);
    const { rows } = await db.pool.query(`SELECT tableoid::regclass::text AS part FROM rings`);
    expect(rows[0].part).toBe('rings_2011_02');
  });
});
