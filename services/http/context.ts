/**
 * What every route can reach, declared once: the repositories (the only door to SQL), the
 * configuration, and the caller's key. Routes never build SQL themselves.
 */
import type { Pool } from '../db/pool.ts';
import type { Config } from '../db/config.ts';
import type { KeyRecord, Role } from '../db/keys.ts';
import type { KeysRepository } from '../db/keys.ts';
import type { UnitsRepository } from '../db/units.ts';

export interface Repositories {
  units: UnitsRepository;
  keys: KeysRepository;
}

/** Who may call a route: read (viewer and up), act (operator and up), admin, ingest (ingest or admin), public. */
export type Access = 'public' | 'read' | 'act' | 'admin' | 'ingest';

export const ACCESS_ROLES: Record<Exclude<Access, 'public'>, readonly Role[]> = {
  read: ['viewer', 'operator', 'admin'],
  act: ['operator', 'admin'],
  admin: ['admin'],
  ingest: ['ingest', 'admin'],
};

declare module 'fastify' {
  interface FastifyInstance {
    repos: Repositories;
    pool: Pool;
    appConfig: Config;
  }
  interface FastifyRequest {
    principal: KeyRecord | null;
  }
  interface FastifyContextConfig {
    access?: Access;
  }
}
