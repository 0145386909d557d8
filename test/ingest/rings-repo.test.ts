/**
 * The rings repository's write path under concurrency: two writes of overlapping rings at the
 * same time store each ring once with exact counts, and making a new month's partition does not
 * wait for another write that is still open.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { RingCopyEncoder, RingWrite, countRings, readRings, type RingRow } from '../../services/db/rings.ts';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';

let db: TestDatabase;
beforeAll(async () => {
  db = await createTestDatabase();
});
afterAll(async () => db?.drop());

const row = (unitId: string, tsMs: number): RingRow => ({
  unitId, tsMs, loadMw: 20, ambientC: 10, ambientKPa: 101, speedPct: 100, cdtC: null, cdpKPa: null, fuelFlowKgS: null, flameDetected: false, exhaustC: [550, NaN, 551.5],
});
const encode = (rows: RingRow[]) => {
  const e = new RingCopyEncoder(64);
  for (const r of rows) e.add(r);
  return e;
};
const T0 = Date.UTC(2026, 0, 10);

describe('RingWrite', () => {
  it('two open writes of overlapping rings: the later one waits, then counts the overlap as duplicates', async () => {
    const a = await RingWrite.open(db.pool);
    const b = await RingWrite.open(db.pool);
    expect(await a.write(encode(Array.from({ length: 10 }, (_, i) => row('race-1', T0 + i * 1000))))).toEqual({ accepted: 10, duplicates: 0 });
    // b sees none of a's uncommitted rings, copies straight in and must wait on a.
    const pending = b.write(encode(Array.from({ length: 10 }, (_, i) => row('race-1', T0 + (5 + i) * 1000))));
    await new Promise((r) => setTimeout(r, 100));
    await a.commit();
    expect(await pending).toEqual({ accepted: 5, duplicates: 5 });
    await b.commit();
    expect(await countRings(db.pool, 'race-1')).toBe(15);
    const back = await readRings(db.pool, 'race-1', T0, T0 + 3_600_000, 100);
    expect(back.map((r) => (r.tsMs - T0) / 1000)).toEqual(Array.from({ length: 15 }, (_, i) => i));
    expect(Array.from(back[0].exhaustC)).toEqual([550, NaN, 551.5]);
    expect(back[0].flameDetected).toBe(false);
  });

  it('a new month is attached while another write holds the ring table open, and rolled back with its write', async () => {
    const open = await RingWrite.open(db.pool);
    await open.write(encode([row('part-1', T0)]));
    const old = await RingWrite.open(db.pool);
    expect(await old.write(encode([row('part-1', Date.UTC(2012, 6, 4))]))).toEqual({ accepted: 1, duplicates: 0 });
    await old.commit();
    const undone = await RingWrite.open(db.pool);
    await undone.write(encode([row('part-1', Date.UTC(2011, 1, 4))]));
    await undone.rollback();
    await open.commit();
    const parts = await db.pool.query(`SELECT to_regclass('rings_2012_07') IS NOT NULL AS kept, to_regclass('rings_2011_02') IS NOT NULL AS undone`);
    expect(parts.rows[0]).toEqual({ kept: true, undone: false });
    expect(await countRings(db.pool, 'part-1')).toBe(2);
    // The month rolled back is made again when needed.
    const later = await RingWrite.open(db.pool);
    expect(await later.write(encode([row('part-1', Date.UTC(2011, 1, 4))]))).toEqual({ accepted: 1, duplicates: 0 });
    await later.commit();
    expect(await countRings(db.pool, 'part-1')).toBe(3);
  });
});
