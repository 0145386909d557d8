/**
 * Claims repository: worker processes and the units each one analyses. A unit is held by at
 * most one worker at a time (one row per unit); a worker claims free or expired rows with
 * FOR UPDATE SKIP LOCKED so two workers claiming at once never wait for or take the same
 * unit, renews its leases while it works, and gives units back when it holds more than its
 * share. Every query about the workers and unit_claims tables is here.
 */
import type pg from 'pg';

type Queryable = pg.Pool | pg.ClientBase;

/** Registers the worker or refreshes its heartbeat. */
export async function heartbeat(q: Queryable, workerId: string, host: string, pid: number): Promise<void> {
  await q.query(
    `INSERT INTO workers (worker_id, host, pid) VALUES ($1, $2, $3)
     ON CONFLICT (worker_id) DO UPDATE SET heartbeat_at = now(), host = excluded.host, pid = excluded.pid`,
    [workerId, host, pid],
  );
}

/** Removes the worker and frees its units at once (a clean stop). */
export async function retireWorker(q: Queryable, workerId: string): Promise<void> {
  await q.query(
    `WITH l AS (SELECT unit_id FROM unit_claims WHERE worker_id = $1 ORDER BY unit_id FOR UPDATE)
     UPDATE unit_claims c SET worker_id = NULL, lease_until = '-infinity' FROM l WHERE c.unit_id = l.unit_id`,
    [workerId],
  );
  await q.query(`DELETE FROM workers WHERE worker_id = $1`, [workerId]);
}

/** The other workers registered from this host, with their process ids. */
export async function workersOnHost(q: Queryable, host: string, exceptWorkerId: string): Promise<Array<{ workerId: string; pid: number }>> {
  const { rows } = await q.query(`SELECT worker_id, pid FROM workers WHERE host = $1 AND worker_id <> $2`, [host, exceptWorkerId]);
  return rows.map((r) => ({ workerId: r.worker_id as string, pid: Number(r.pid) }));
}

/** Every unit gets a claim row (new units appear as unclaimed). Returns all unit ids. */
export async function ensureClaimRows(q: Queryable): Promise<string[]> {
  // Only units without a row: a conflict check on an existing row would wait for a round that
  // is extending its lease.
  await q.query(`INSERT INTO unit_claims (unit_id) SELECT id FROM units u WHERE NOT EXISTS (SELECT 1 FROM unit_claims c WHERE c.unit_id = u.id) ON CONFLICT (unit_id) DO NOTHING`);
  const { rows } = await q.query(`SELECT id FROM units ORDER BY id`);
  return rows.map((r) => r.id as string);
}

/** Workers whose heartbeat is younger than staleS seconds. */
export async function liveWorkerCount(q: Queryable, staleS: number): Promise<number> {
  const { rows } = await q.query(`SELECT count(*)::int AS n FROM workers WHERE heartbeat_at > now() - make_interval(secs => $1)`, [staleS]);
  return Math.max(1, rows[0].n as number);
}

/**
 * Extends this worker's live leases; returns the units it still holds. Claim rows locked this
 * instant are skipped, not waited for: they are locked by this worker's own analysis rounds,
 * which extend the lease themselves (lockUnits), so renewing never stalls a round nor joins a
 * lock cycle with one. Such a unit counts as held when its lease is still live.
 */
export async function renewLeases(q: Queryable, workerId: string, leaseS: number): Promise<string[]> {
  const { rows } = await q.query(
    `WITH l AS (SELECT unit_id FROM unit_claims WHERE worker_id = $1 AND lease_until > now() FOR UPDATE SKIP LOCKED),
          u AS (UPDATE unit_claims c SET lease_until = now() + make_interval(secs => $2) FROM l WHERE c.unit_id = l.unit_id RETURNING c.unit_id)
     SELECT unit_id FROM u
     UNION
     SELECT unit_id FROM unit_claims WHERE worker_id = $1 AND lease_until > now()`,
    [workerId, leaseS],
  );
  return rows.map((r) => r.unit_id as string).sort();
}

/**
 * Claims up to `max` units that are free or whose lease has expired, skipping rows another
 * worker has locked this instant. Returns the units claimed.
 */
export async function claimUnits(q: Queryable, workerId: string, max: number, leaseS: number): Promise<string[]> {
  if (max <= 0) return [];
  const { rows } = await q.query(
    `WITH free AS (
       SELECT unit_id FROM unit_claims
        WHERE worker_id IS NULL OR lease_until <= now()
        ORDER BY lease_until, unit_id
        LIMIT $2
        FOR UPDATE SKIP LOCKED)
     UPDATE unit_claims c SET worker_id = $1, lease_until = now() + make_interval(secs => $3), claimed_at = now()
       FROM free WHERE c.unit_id = free.unit_id
     RETURNING c.unit_id`,
    [workerId, max, leaseS],
  );
  return rows.map((r) => r.unit_id as string).sort();
}

/** Gives units back (only those this worker still holds). */
export async function releaseUnits(q: Queryable, workerId: string, unitIds: string[]): Promise<void> {
  if (unitIds.length === 0) return;
  // Rows locked in unit order, as analysis rounds lock them: no lock cycle with a round.
  await q.query(
    `WITH l AS (SELECT unit_id FROM unit_claims WHERE worker_id = $1 AND unit_id = ANY($2::text[]) ORDER BY unit_id FOR UPDATE)
     UPDATE unit_claims c SET worker_id = NULL, lease_until = '-infinity' FROM l WHERE c.unit_id = l.unit_id`,
    [workerId, unitIds],
  );
}

export interface ClaimRecord {
  unitId: string;
  workerId: string | null;
  leaseUntil: Date | null;
}

/** The claims table as it is now (for status, tests and operators). */
export async function listClaims(q: Queryable): Promise<ClaimRecord[]> {
  const { rows } = await q.query(`SELECT unit_id, worker_id, CASE WHEN lease_until = '-infinity' THEN NULL ELSE lease_until END AS lease_until FROM unit_claims ORDER BY unit_id`);
  return rows.map((r) => ({ unitId: r.unit_id, workerId: r.worker_id, leaseUntil: r.lease_until }));
}
