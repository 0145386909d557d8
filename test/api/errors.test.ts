/**
 * The error envelope's status for failures that come from PostgreSQL: a lost database and a
 * write rolled back because of a concurrent one are both 503 (nothing stored, retry is safe,
 * API.md "Errors"); anything else unexpected is a 500 that says nothing of the internals.
 */
import { describe, expect, it } from 'vitest';
import { toErrorReply } from '../../services/http/errors.ts';

const pgError = (code: string, message: string) => Object.assign(new Error(message), { code });

describe('error replies for database failures', () => {
  it('a lost connection is 503 database_unavailable', () => {
    expect(toErrorReply(pgError('57P01', 'terminating connection due to administrator command'))).toMatchObject({ status: 503, body: { error: 'database_unavailable' } });
  });
  it('a deadlock or a serialization failure is 503 write_conflict, asking for the same request again', () => {
    for (const code of ['40P01', '40001']) {
      const r = toErrorReply(pgError(code, 'deadlock detected'));
      expect(r.status).toBe(503);
      expect(r.body.error).toBe('write_conflict');
      expect(r.body.message).toMatch(/nothing was stored/);
    }
  });
  it('a constraint violation is not retried: 500, with no internals in the message', () => {
    const r = toErrorReply(pgError('23505', 'duplicate key value violates unique constraint "rings_pkey"'));
    expect(r.status).toBe(500);
    expect(r.body.message).not.toContain('rings_pkey');
  });
});
