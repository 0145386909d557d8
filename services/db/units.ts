/**
 * Units repository: every query about units and their versioned configuration. A version's
 * configuration is the whole UnitConfig; the one in force at time t has the latest
 * effective_from <= t (version 1 is in force from the beginning of time).
 */
import type pg from 'pg';
import type { UnitConfig } from '../core/types.ts';
import { withTransaction } from './pool.ts';
import { requestReanalysis } from './progress.ts';

export interface UnitIdentity {
  id: string;
  name: string;
  site: string;
  /** Configuration family (units of one design compared side by side); null: none. */
  family?: string | null;
}

export interface ConfigVersionRecord {
  version: number;
  /** null: in force from the beginning. */
  effectiveFrom: string | null;
  createdAt: string;
  config: UnitConfig;
}

export interface UnitRecord extends UnitIdentity {
  config: UnitConfig;
  version: number;
  versions: ConfigVersionRecord[];
}

export class DuplicateUnitError extends Error {}
export class DuplicateEffectiveTimeError extends Error {}

const iso = (v: unknown): string | null => {
  if (v instanceof Date) return Number.isFinite(v.getTime()) ? v.toISOString() : null;
  if (v == null || v === '-infinity' || v === -Infinity) return null;
  return String(v);
};

function versionsOf(rows: Record<string, unknown>[]): ConfigVersionRecord[] {
  return rows.map((r) => ({
    version: Number(r.version),
    effectiveFrom: iso(r.effective_from),
    createdAt: iso(r.created_at) as string,
    config: r.config as UnitConfig,
  }));
}

/** The version in force at instant t (ms since epoch) among versions sorted by effectiveFrom. */
export function versionInForce(versions: ConfigVersionRecord[], tMs: number): ConfigVersionRecord | undefined {
  let best: ConfigVersionRecord | undefined;
  let bestFrom = -Infinity;
  for (const v of versions) {
    const from = v.effectiveFrom === null ? -Infinity : Date.parse(v.effectiveFrom);
    if (from <= tMs && (best === undefined || from >= bestFrom)) {
      best = v;
      bestFrom = from;
    }
  }
  return best;
}

/** Every configuration version of a unit, oldest effective first, on a pool or inside a transaction. */
export async function unitVersions(q: Pick<pg.ClientBase, 'query'>, id: string): Promise<ConfigVersionRecord[]> {
  return (await unitVersionsMany(q, [id])).get(id) ?? [];
}

/**
 * The configuration versions of many units in one statement, by unit, oldest effective first;
 * a unit that does not exist is missing from the map.
 */
export async function unitVersionsMany(q: Pick<pg.ClientBase, 'query'>, ids: readonly string[]): Promise<Map<string, ConfigVersionRecord[]>> {
  const byUnit = new Map<string, Record<string, unknown>[]>();
  if (ids.length === 0) return new Map();
  const { rows } = await q.query(
    `SELECT unit_id, version, effective_from, created_at, config FROM unit_config_versions WHERE unit_id = ANY($1::text[]) ORDER BY unit_id, effective_from`,
    [ids],
  );
  for (const v of rows) {
    const list = byUnit.get(v.unit_id);
    if (list) list.push(v);
    else byUnit.set(v.unit_id, [v]);
  }
  return new Map([...byUnit].map(([id, vs]) => [id, versionsOf(vs)]));
}

export function createUnitsRepository(pool: pg.Pool) {
  async function load(ids: string[] | null): Promise<UnitRecord[]> {
    const units = await pool.query(
      `SELECT id, name, site, family FROM units WHERE $1::text[] IS NULL OR id = ANY($1) ORDER BY id`,
      [ids],
    );
    if (units.rows.length === 0) return [];
    const byUnit = await unitVersionsMany(pool, units.rows.map((u) => u.id as string));
    const now = Date.now();
    return units.rows.map((u) => {
      const vs = byUnit.get(u.id) ?? [];
      const current = versionInForce(vs, now) ?? vs[0];
      return { id: u.id, name: u.name, site: u.site, family: u.family ?? null, config: current.config, version: current.version, versions: vs };
    });
  }

  return {
    async create(unit: UnitIdentity, config: UnitConfig, by: string | null): Promise<UnitRecord> {
      try {
        await withTransaction(pool, async (c) => {
          await c.query(`INSERT INTO units (id, name, site, family) VALUES ($1, $2, $3, $4)`, [unit.id, unit.name, unit.site, unit.family ?? null]);
          await c.query(
            `INSERT INTO unit_config_versions (unit_id, version, effective_from, config, created_by) VALUES ($1, 1, '-infinity', $2, $3)`,
            [unit.id, JSON.stringify(config), by],
          );
        });
      } catch (err) {
        if ((err as { code?: string }).code === '23505') throw new DuplicateUnitError(`unit ${unit.id} already exists`);
        throw err;
      }
      return (await load([unit.id]))[0];
    },

    async get(id: string): Promise<UnitRecord | undefined> {
      return (await load([id]))[0];
    },

    async exists(id: string): Promise<boolean> {
      const { rowCount } = await pool.query(`SELECT 1 FROM units WHERE id = $1`, [id]);
      return (rowCount ?? 0) > 0;
    },

    /** The units of a configuration family, within a key's scope (null: every unit). */
    async family(family: string, scope: string[] | null): Promise<UnitRecord[]> {
      const { rows } = await pool.query(`SELECT id FROM units WHERE family = $1 AND ($2::text[] IS NULL OR id = ANY($2)) ORDER BY id`, [family, scope]);
      return rows.length ? load(rows.map((r) => r.id as string)) : [];
    },

    /** Every unit, or those listed (a key's unit scope). */
    async list(ids: string[] | null = null): Promise<UnitRecord[]> {
      return load(ids);
    },

    /** Every configuration version of a unit, oldest effective first; [] for an unknown unit. */
    versions(id: string): Promise<ConfigVersionRecord[]> {
      return unitVersions(pool, id);
    },

    /**
     * Changes name or site in place, and, when any configuration field changes, adds a new
     * configuration version (the version in force at effectiveFrom with the changes applied)
     * that takes effect at effectiveFrom. Returns undefined for an unknown unit.
     */
    async update(
      id: string,
      identity: Partial<Pick<UnitIdentity, 'name' | 'site' | 'family'>>,
      configChange: ((base: UnitConfig) => UnitConfig) | null,
      effectiveFrom: Date,
      by: string | null,
    ): Promise<UnitRecord | undefined> {
      const found = await withTransaction(pool, async (c) => {
        const u = await c.query(`SELECT id FROM units WHERE id = $1 FOR UPDATE`, [id]);
        if (u.rowCount === 0) return false;
        if (identity.name !== undefined || identity.site !== undefined) {
          await c.query(`UPDATE units SET name = coalesce($2, name), site = coalesce($3, site) WHERE id = $1`, [id, identity.name ?? null, identity.site ?? null]);
        }
        // null takes the unit out of its family
        if (identity.family !== undefined) await c.query(`UPDATE units SET family = $2 WHERE id = $1`, [id, identity.family]);
        if (configChange) {
          const base = await c.query(
            `SELECT config FROM unit_config_versions WHERE unit_id = $1 AND effective_from <= $2 ORDER BY effective_from DESC LIMIT 1`,
            [id, effectiveFrom],
          );
          const next = configChange(base.rows[0].config as UnitConfig);
          try {
            await c.query(
              `INSERT INTO unit_config_versions (unit_id, version, effective_from, config, created_by)
               SELECT $1, coalesce(max(version), 0) + 1, $2, $3, $4 FROM unit_config_versions WHERE unit_id = $1`,
              [id, effectiveFrom, JSON.stringify(next), by],
            );
          } catch (err) {
            if ((err as { code?: string }).code === '23505') throw new DuplicateEffectiveTimeError(`unit ${id} already has a configuration taking effect at ${effectiveFrom.toISOString()}`);
            throw err;
          }
          // A version taking effect before the analysis watermark: the rings from then on are judged again with it.
          await requestReanalysis(c, id, effectiveFrom.getTime());
        }
        return true;
      });
      return found ? (await load([id]))[0] : undefined;
    },
  };
}

export type UnitsRepository = ReturnType<typeof createUnitsRepository>;
