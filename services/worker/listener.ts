/**
 * LISTEN for new rings on a dedicated connection that is reconnected when it drops. Each
 * notification names the units that got rings (a JSON array) or '*' for every unit; after a
 * reconnect the caller is told '*' since notifications sent meanwhile are lost.
 */
import type { Logger } from '../db/logger.ts';
import type { Pool, PoolClient } from '../db/pool.ts';
import { NEW_RINGS_CHANNEL } from '../db/rings.ts';

export type NewRingsHandler = (units: string[] | '*') => void;

export function parseNewRingsPayload(payload: string | undefined): string[] | '*' {
  if (!payload || payload === '*') return '*';
  try {
    const v = JSON.parse(payload) as unknown;
    if (Array.isArray(v) && v.every((x) => typeof x === 'string')) return v as string[];
  } catch {
    // fall through
  }
  return '*';
}

export function startListener(pool: Pool, logger: Logger, onRings: NewRingsHandler): { stop(): Promise<void>; connected(): boolean } {
  let client: PoolClient | null = null;
  let stopped = false;
  let timer: NodeJS.Timeout | null = null;
  let delayMs = 250;
  let first = true;

  const schedule = () => {
    if (stopped || timer) return;
    timer = setTimeout(() => {
      timer = null;
      void connect();
    }, delayMs);
    delayMs = Math.min(delayMs * 2, 10_000);
  };

  const drop = (c: PoolClient, err?: Error) => {
    if (client !== c) return;
    client = null;
    if (err) logger.warn({ err: err.message }, 'new-rings listener lost its connection; reconnecting');
    c.removeAllListeners('notification');
    try {
      c.release(true);
    } catch {
      // already released
    }
    schedule();
  };

  async function connect(): Promise<void> {
    if (stopped) return;
    let c: PoolClient;
    try {
      c = await pool.connect();
    } catch (err) {
      logger.warn({ err: (err as Error).message }, 'new-rings listener cannot connect; retrying');
      schedule();
      return;
    }
    if (stopped) {
      c.release();
      return;
    }
    client = c;
    c.on('error', (err) => drop(c, err));
    c.on('end', () => drop(c, new Error('connection ended')));
    c.on('notification', (msg) => {
      if (msg.channel === NEW_RINGS_CHANNEL) onRings(parseNewRingsPayload(msg.payload));
    });
    try {
      await c.query(`LISTEN ${NEW_RINGS_CHANNEL}`);
    } catch (err) {
      drop(c, err as Error);
      return;
    }
    delayMs = 250;
    if (!first) onRings('*');
    first = false;
  }

  void connect();
  return {
    connected: () => client !== null,
    async stop() {
      stopped = true;
      if (timer) clearTimeout(timer);
      const c = client;
      client = null;
      if (c) {
        c.removeAllListeners('notification');
        try {
          await c.query(`UNLISTEN ${NEW_RINGS_CHANNEL}`);
          c.release();
        } catch {
          c.release(true);
        }
      }
    },
  };
}
