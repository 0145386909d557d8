/**
 * Keys at start: CANSIGHT_ADMIN_KEY makes an admin key with exactly that value exist (also after
 * it was revoked); without it, a first start with no admin makes one and returns it once.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from './helpers/db.ts';
import { bootstrapKeys } from '../services/cli/serve.ts';
import { loadConfig } from '../services/db/config.ts';
import { createKeysRepository } from '../services/db/keys.ts';
import type { Runtime } from '../services/cli/runtime.ts';

const dbs: TestDatabase[] = [];
afterAll(async () => {
  for (const d of dbs) await d.drop();
});

function runtimeOf(db: TestDatabase, env: Record<string, string>): Runtime {
  return { config: loadConfig(env), pool: db.pool } as unknown as Runtime;
}

describe('keys at start', () => {
  it('creates the CANSIGHT_ADMIN_KEY admin key, and brings it back after a revocation', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const value = 'bootstrap-admin-key-0123456789';
    expect(await bootstrapKeys(runtimeOf(db, { CANSIGHT_ADMIN_KEY: value }))).toBeUndefined();
    const keys = createKeysRepository(db.pool, { cacheMs: 0 });
    expect((await keys.verify(value))?.role).toBe('admin');
    await keys.revoke(value.slice(0, 10));
    expect(await keys.verify(value)).toBeNull();
    await bootstrapKeys(runtimeOf(db, { CANSIGHT_ADMIN_KEY: value }));
    expect((await keys.verify(value))?.role).toBe('admin');
    expect(await keys.countActiveAdmins()).toBe(1);
  });

  it('makes one admin key on a first start without one, and none on the next start', async () => {
    const db = await createTestDatabase();
    dbs.push(db);
    const first = await bootstrapKeys(runtimeOf(db, {}));
    expect(first).toMatch(/^csk_/);
    expect(await bootstrapKeys(runtimeOf(db, {}))).toBeUndefined();
    const keys = createKeysRepository(db.pool, { cacheMs: 0 });
    expect((await keys.verify(first!))?.role).toBe('admin');
    expect(await keys.countActiveAdmins()).toBe(1);
  });
});
