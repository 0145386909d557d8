/**
 * Keys at start and their rotation. CANSIGHT_ADMIN_KEY is made an admin key the first time its
 * value is seen; revoked, it stays revoked on every later start, which says so. Without it, a
 * first start with no admin makes one and returns it once. `keys rotate-admin` replaces an
 * admin key in one step; `keys create --units ""` is refused, not a key for every unit.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from './helpers/db.ts';
import { bootstrapKeys } from '../services/cli/serve.ts';
import { keysCommand } from '../services/cli/keys.ts';
import { UsageError } from '../services/cli/usage.ts';
import { loadConfig } from '../services/db/config.ts';
import { createLogger } from '../services/db/logger.ts';
import { createKeysRepository, hashKey, keyIdOf } from '../services/db/keys.ts';
import type { Runtime } from '../services/cli/runtime.ts';

const dbs: TestDatabase[] = [];
afterAll(async () => {
  for (const d of dbs) await d.drop();
});

async function database(): Promise<TestDatabase> {
  const db = await createTestDatabase();
  dbs.push(db);
  return db;
}

/** A runtime on the test database whose log lines are kept. */
function runtimeOf(db: TestDatabase, env: Record<string, string>): Runtime & { lines: Array<Record<string, unknown>> } {
  const lines: Array<Record<string, unknown>> = [];
  const logger = createLogger('info', {}, { write: (l: string) => void lines.push(JSON.parse(l)) });
  return { config: loadConfig(env), pool: db.pool, logger, lines } as unknown as Runtime & { lines: typeof lines };
}

const VALUE = 'bootstrap-admin-key-0123456789-abcdef';

describe('keys at start', () => {
  it('makes the CANSIGHT_ADMIN_KEY admin key once; revoked, it stays revoked and the start says so', async () => {
    const db = await database();
    const first = runtimeOf(db, { CANSIGHT_ADMIN_KEY: VALUE });
    expect(await bootstrapKeys(first)).toBeUndefined();
    expect(first.lines.map((l) => l.msg)).toContain('CANSIGHT_ADMIN_KEY registered as an admin key');
    const keys = createKeysRepository(db.pool, { cacheMs: 0 });
    expect((await keys.verify(VALUE))?.role).toBe('admin');
    expect(await keys.revoke(keyIdOf(hashKey(VALUE)))).toBe(1);
    expect(await keys.verify(VALUE)).toBeNull();

    const again = runtimeOf(db, { CANSIGHT_ADMIN_KEY: VALUE });
    // No live admin is left, so the start makes a new one (shown once); the revoked key stays revoked.
    expect(await bootstrapKeys(again)).toMatch(/^csk_/);
    expect(await keys.verify(VALUE)).toBeNull();
    const said = again.lines.find((l) => l.level === 50);
    expect(said?.msg).toMatch(/CANSIGHT_ADMIN_KEY \(key-[0-9a-f]{12}\) was revoked at .* and stays revoked/);
    expect(said?.msg).toContain('cansight keys rotate-admin');
  });

  it('makes one admin key on a first start without one, and none on the next start', async () => {
    const db = await database();
    const first = await bootstrapKeys(runtimeOf(db, {}));
    expect(first).toMatch(/^csk_/);
    expect(await bootstrapKeys(runtimeOf(db, {}))).toBeUndefined();
    const keys = createKeysRepository(db.pool, { cacheMs: 0 });
    expect((await keys.verify(first!))?.role).toBe('admin');
    expect(await keys.countActiveAdmins()).toBe(1);
  });

  it('refuses a CANSIGHT_ADMIN_KEY shorter than 32 characters', () => {
    expect(() => loadConfig({ CANSIGHT_ADMIN_KEY: 'sixteen-chars-ok' })).toThrow(/CANSIGHT_ADMIN_KEY: is 16 characters long; use a random value of at least 32/);
  });

  it('shows keys by an id made from the hash, never by characters of the secret', async () => {
    const db = await database();
    const keys = createKeysRepository(db.pool, { cacheMs: 0 });
    const { key, record } = await keys.create('viewer', null);
    expect(record.keyId).toBe('key-' + hashKey(key).slice(0, 12));
    // No run of 4 or more characters of the key appears in its id.
    for (let i = 0; i + 4 <= key.length; i++) expect(record.keyId).not.toContain(key.slice(i, i + 4));
  });
});

describe('cansight keys', () => {
  it('rotate-admin makes a new admin key and revokes the one CANSIGHT_ADMIN_KEY names, in one step', async () => {
    const db = await database();
    await bootstrapKeys(runtimeOf(db, { CANSIGHT_ADMIN_KEY: VALUE }));
    const out: string[] = [];
    expect(await keysCommand(['rotate-admin'], db.pool, (l) => out.push(l), VALUE)).toBe(0);
    const fresh = out.find((l) => l.startsWith('csk_'))!;
    const keys = createKeysRepository(db.pool, { cacheMs: 0 });
    expect((await keys.verify(fresh))?.role).toBe('admin');
    expect(await keys.verify(VALUE)).toBeNull();
    expect(out[0]).toBe(`revoked admin key ${keyIdOf(hashKey(VALUE))}`);
    expect(await keys.countActiveAdmins()).toBe(1);
  });

  it('create --units "" is refused, not a key for every unit', async () => {
    const db = await database();
    await expect(keysCommand(['create', '--role', 'viewer', '--units', ''], db.pool, () => undefined)).rejects.toThrow(UsageError);
    await expect(keysCommand(['create', '--role', 'viewer', '--units', ' , '], db.pool, () => undefined)).rejects.toThrow(/--units names no unit/);
    expect(await createKeysRepository(db.pool).list()).toHaveLength(0);
  });
});
