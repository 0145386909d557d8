/** GET /health (the process answers) and GET /ready (database reachable, migrations current). No key needed. */
import type { FastifyInstance } from 'fastify';
import { Type } from 'typebox';
import { migrationsCurrent } from '../db/migrate.ts';

export async function healthRoutes(app: FastifyInstance): Promise<void> {
  app.get('/health', {
    schema: { tags: ['health'], response: { 200: Type.Object({ status: Type.Literal('ok') }) } },
    config: { access: 'public' },
  }, async () => ({ status: 'ok' as const }));

  app.get('/ready', {
    schema: {
      tags: ['health'],
      response: {
        200: Type.Object({ ready: Type.Boolean(), database: Type.Boolean(), migrations: Type.Boolean() }),
        503: Type.Object({ ready: Type.Boolean(), database: Type.Boolean(), migrations: Type.Boolean() }),
      },
    },
    config: { access: 'public' },
  }, async (_req, reply) => {
    let database = false;
    let migrations = false;
    try {
      await app.pool.query('SELECT 1');
      database = true;
      migrations = await migrationsCurrent(app.pool);
    } catch {
      // reported below
    }
    const ready = database && migrations;
    return reply.status(ready ? 200 : 503).send({ ready, database, migrations });
  });
}
