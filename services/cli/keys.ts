/**
 * `cansight keys create --role R [--units a,b] [--label L]`, `keys list`, `keys revoke ID|KEY-ID`,
 * `keys rotate-admin [--old ID|KEY-ID] [--label L]` (a new admin key; the old one, by default the
 * one CANSIGHT_ADMIN_KEY names, revoked in the same step).
 */
import { parseArgs } from 'node:util';
import { createKeysRepository, hashKey, keyIdOf, ROLES, type Role } from '../db/keys.ts';
import type { Pool } from '../db/pool.ts';
import { COMMANDS, UsageError } from './usage.ts';

export async function keysCommand(args: string[], pool: Pool, out: (line: string) => void, adminKey?: string): Promise<number> {
  const [sub, ...rest] = args;
  const repo = createKeysRepository(pool);
  switch (sub) {
    case 'create': {
      const { values } = parseArgs({ args: rest, options: COMMANDS.keysCreate.options, strict: true });
      if (!values.role) throw new UsageError('keys create needs --role (one of ' + ROLES.join(', ') + ')');
      if (!(ROLES as readonly string[]).includes(values.role)) throw new UsageError(`--role ${values.role} is not one of ${ROLES.join(', ')}`);
      const units = values.units === undefined ? null : values.units.split(',').map((s) => s.trim()).filter(Boolean);
      if (units !== null && units.length === 0) throw new UsageError('--units names no unit; leave --units out for a key that reaches every unit');
      for (const u of units ?? []) if (!/^[a-z0-9-]{1,40}$/.test(u)) throw new UsageError(`--units: "${u}" is not a unit id`);
      const { key, record } = await repo.create(values.role as Role, units, values.label ?? null);
      out(`key ${record.id} role=${record.role} units=${record.unitIds?.join(',') ?? '*'}`);
      out(key);
      out('(shown once: store it now)');
      return 0;
    }
    case 'list': {
      parseArgs({ args: rest, options: COMMANDS.keysList.options, strict: true });
      const rows = await repo.list();
      out(['id', 'key id', 'role', 'units', 'created', 'last used', 'revoked'].join('\t'));
      for (const k of rows) {
        out([k.id, k.keyId, k.role, k.unitIds?.join(',') ?? '*', k.createdAt, k.lastUsedAt ?? '-', k.revokedAt ?? '-'].join('\t'));
      }
      return 0;
    }
    case 'revoke': {
      const target = parseArgs({ args: rest, options: COMMANDS.keysRevoke.options, strict: true, allowPositionals: true }).positionals[0];
      if (!target) throw new UsageError('keys revoke needs the id or the key id of a key (see keys list)');
      const n = await repo.revoke(target);
      if (n === 0) {
        out(`no live key has id or key id ${target}`);
        return 1;
      }
      out(`revoked ${n} key${n === 1 ? '' : 's'}`);
      return 0;
    }
    case 'rotate-admin': {
      const { values } = parseArgs({ args: rest, options: COMMANDS.keysRotateAdmin.options, strict: true });
      const old = values.old ?? (adminKey ? keyIdOf(hashKey(adminKey)) : undefined);
      if (!old) throw new UsageError('keys rotate-admin needs --old ID|KEY-ID (see keys list), or CANSIGHT_ADMIN_KEY set to the key to replace');
      const { key, record, revoked } = await repo.rotateAdmin(old, values.label ?? 'rotated admin key');
      if (revoked === 0) out(`note: no live admin key has id or key id ${old}; nothing was revoked`);
      else out(`revoked admin key ${old}`);
      out(`key ${record.id} (${record.keyId}) role=admin units=*`);
      out(key);
      out('(shown once: store it now, and set CANSIGHT_ADMIN_KEY to it, or unset CANSIGHT_ADMIN_KEY)');
      return 0;
    }
    default:
      throw new UsageError('keys needs one of: create, list, revoke, rotate-admin');
  }
}
