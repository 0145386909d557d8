/** `cansight keys create --role R [--units a,b] [--label L]`, `keys list`, `keys revoke ID|PREFIX`. */
import { parseArgs } from 'node:util';
import { createKeysRepository, ROLES, type Role } from '../db/keys.ts';
import type { Pool } from '../db/pool.ts';
import { UsageError } from './usage.ts';

export async function keysCommand(args: string[], pool: Pool, out: (line: string) => void): Promise<number> {
  const [sub, ...rest] = args;
  const repo = createKeysRepository(pool);
  switch (sub) {
    case 'create': {
      const { values } = parseArgs({ args: rest, options: { role: { type: 'string' }, units: { type: 'string' }, label: { type: 'string' } }, strict: true });
      if (!values.role) throw new UsageError('keys create needs --role (one of ' + ROLES.join(', ') + ')');
      if (!(ROLES as readonly string[]).includes(values.role)) throw new UsageError(`--role ${values.role} is not one of ${ROLES.join(', ')}`);
      const units = values.units ? values.units.split(',').map((s) => s.trim()).filter(Boolean) : null;
      for (const u of units ?? []) if (!/^[a-z0-9-]{1,40}$/.test(u)) throw new UsageError(`--units: "${u}" is not a unit id`);
      const { key, record } = await repo.create(values.role as Role, units, values.label ?? null);
      out(`key ${record.id} role=${record.role} units=${record.unitIds?.join(',') ?? '*'}`);
      out(key);
      out('(shown once: store it now)');
      return 0;
    }
    case 'list': {
      const rows = await repo.list();
      out(['id', 'prefix', 'role', 'units', 'created', 'last used', 'revoked'].join('\t'));
      for (const k of rows) {
        out([k.id, k.prefix, k.role, k.unitIds?.join(',') ?? '*', k.createdAt, k.lastUsedAt ?? '-', k.revokedAt ?? '-'].join('\t'));
      }
      return 0;
    }
    case 'revoke': {
      const target = rest[0];
      if (!target) throw new UsageError('keys revoke needs a key id or prefix (see keys list)');
      const n = await repo.revoke(target);
      if (n === 0) {
        out(`no live key has id or prefix ${target}`);
        return 1;
      }
      out(`revoked ${n} key${n === 1 ? '' : 's'}`);
      return 0;
    }
    default:
      throw new UsageError('keys needs one of: create, list, revoke');
  }
}
