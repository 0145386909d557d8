/**
 * The rings repository's write path: a chunk goes straight into the ring table unless it holds a
 * ring twice, a stored ring lies in its time span, or another write stores one of its rings
 * meanwhile; in every case each ring is stored once with exact counts. Two writes of
 * overlapping rings at the same time, and making a new month's partition without waiting for
 * another write that is still open.
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

  const times = (unitId: string, seconds: number[]) => seconds.map((x) => row(unitId, T0 + x * 1000));
  async function writeOnce(rows: RingRow[]): Promise<{ accepted: number; duplicates: number }> {
    const w = await RingWrite.open(db.pool);
    const r = await w.write(encode(rows));
    await w.commit();
    return r;
  }
  const storedSeconds = async (unitId: string) => (await readRings(db.pool, unitId, T0 - 86_400_000, T0 + 86_400_000, 10_000)).map((r) => (r.tsMs - T0) / 1000);

  it('a re-sent chunk, a chunk overlapping stored rings, a ring twice in one chunk: each stored once, exact counts', async () => {
    const u = 'fall-1';
    expect(await writeOnce(times(u, [0, 1, 2, 3]))).toEqual({ accepted: 4, duplicates: 0 });
    expect(await writeOnce(times(u, [0, 1, 2, 3]))).toEqual({ accepted: 0, duplicates: 4 });
    expect(await writeOnce(times(u, [2, 3, 4, 5]))).toEqual({ accepted: 2, duplicates: 2 });
    expect(await writeOnce(times(u, [6, 7, 5, 7, 8]))).toEqual({ accepted: 3, duplicates: 2 });
    // Stored rings inside the chunk's span but none of its times: all of it is new.
    expect(await writeOnce(times(u, [-1, 2.5, 9]))).toEqual({ accepted: 3, duplicates: 0 });
    expect(await storedSeconds(u)).toEqual([-1, 0, 1, 2, 2.5, 3, 4, 5, 6, 7, 8, 9]);
  });

  it('several chunks in one write, some going the slow way, commit together', async () => {
    const u = 'fall-2';
    await writeOnce(times(u, [10, 11]));
    const w = await RingWrite.open(db.pool);
    expect(await w.write(encode(times(u, [0, 1, 2])))).toEqual({ accepted: 3, duplicates: 0 });
    expect(await w.write(encode(times(u, [2, 3, 10])))).toEqual({ accepted: 1, duplicates: 2 });
    expect(await w.write(encode(times(u, [4, 5])))).toEqual({ accepted: 2, duplicates: 0 });
    expect(await countRings(db.pool, u)).toBe(2); // nothing visible before commit
    expect(await w.commit()).toEqual({ unitIds: [u] });
    expect(await storedSeconds(u)).toEqual([0, 1, 2, 3, 4, 5, 10, 11]);
  });

  it('unit ids with quotes and backslashes go through the span check as literals', async () => {
    const u = "o'hare \\ $span$ 'x";
    expect(await writeOnce(times(u, [0, 1]))).toEqual({ accepted: 2, duplicates: 0 });
    expect(await writeOnce(times(u, [1, 2]))).toEqual({ accepted: 1, duplicates: 1 });
    expect(await countRings(db.pool, u)).toBe(3);
  });

  it('concurrent writes of overlapping rings, each committing when its chunk is written: the union stored once, counts adding up', async () => {
    const u = 'fall-3';
    const sets = [[0, 1, 2, 3, 4], [3, 4, 5, 6], [6, 7, 0], [1, 8, 9], [9, 2, 10]];
    const writes = await Promise.all(sets.map(() => RingWrite.open(db.pool)));
    // Whichever copies a ring first holds it; the others wait for that write to commit, then
    // take their chunk the slow way.
    const results = await Promise.all(
      sets.map(async (set, i) => {
        const r = await writes[i].write(encode(times(u, set)));
        await writes[i].commit();
        return r;
      }),
    );
    expect(results.reduce((a, r) => a + r.accepted, 0)).toBe(11);
    expect(results.reduce((a, r) => a + r.accepted + r.duplicates, 0)).toBe(sets.flat().length);
    expect(await storedSeconds(u)).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10]);
  });
});
