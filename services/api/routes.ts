/**
 * The read and action routes of the API, as one route set for the HTTP server
 * (services/http/server.ts). Registered as if each route plugin were registered on the server
 * itself (fastify-plugin: no context between).
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { unitRoutes } from './routes/units.ts';
import { alertRoutes } from './routes/alerts.ts';
import { workerRoutes } from './routes/status.ts';
import { dashboardRoutes } from './routes/dashboard.ts';
import { fleetRoutes } from './routes/fleet.ts';
import { analysisRoutes } from './routes/analysis.ts';
import { chamberRoutes } from './routes/chambers.ts';
import { thermocoupleRoutes } from './routes/thermocouples.ts';
import { pictureRoutes } from './routes/pictures.ts';
import { reviewRoutes } from './routes/review.ts';
import { swirlRoutes } from './routes/swirl.ts';
import { startRoutes } from './routes/starts.ts';
import { outcomeRoutes } from './routes/outcomes.ts';
import { familyRoutes } from './routes/families.ts';
import { eventRoutes } from './routes/events.ts';

/** In the order the OpenAPI document lists them. */
const ROUTE_SETS = [unitRoutes, alertRoutes, workerRoutes, dashboardRoutes, fleetRoutes, analysisRoutes, chamberRoutes, thermocoupleRoutes, pictureRoutes, reviewRoutes, swirlRoutes, startRoutes, outcomeRoutes, familyRoutes, eventRoutes];

export const apiRoutes = fp(async (app: FastifyInstance): Promise<void> => {
  for (const routes of ROUTE_SETS) await app.register(routes);
});
