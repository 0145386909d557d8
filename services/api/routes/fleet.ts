/**
 * The fleet: GET /v1/fleet (one row per unit in the key's scope, worst first: worst active
 * alert, data freshness, spread against its limit, coverage) and GET /v1/fleet.svg (the same as
 * a picture for a wall screen or for printing).
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type Static } from 'typebox';
import { unitScope } from '../auth.ts';
import { fleetSvg, rankFleet, type Freshness } from '../svg/fleet.ts';
import type { FleetRecord } from '../../db/reads.ts';
import { readErrors, readsOf } from './read-common.ts';

const Grade = Type.Union([Type.Literal('notice'), Type.Literal('warning'), Type.Literal('alarm'), Type.Literal('critical')]);
const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);

export const FleetRow = Type.Object({
  unitId: Type.String(),
  name: Type.String(),
  site: Type.String(),
  temperatureUnit: Type.Union([Type.Literal('C'), Type.Literal('F')], { description: 'how people see this unit; payload temperatures stay °C' }),
  lastRingTs: Nullable(Type.String({ description: 'latest stored ring' })),
  lastAnalysisTs: Nullable(Type.String({ description: 'latest analysed ring' })),
  dataAgeS: Nullable(Type.Number({ description: 'seconds since the latest stored ring' })),
  freshness: Type.Union([Type.Literal('live'), Type.Literal('late'), Type.Literal('silent'), Type.Literal('no_data')], {
    description: 'live: a ring within 5 minutes; late: within the silent-unit time; silent: none for longer; no_data: never',
  }),
  loadFraction: Nullable(Type.Number({ description: 'corrected load of the latest analysed ring, fraction of ISO rating' })),
  spreadC: Nullable(Type.Number({ description: 'exhaust spread of the latest analysed ring, °C' })),
  spreadLimitC: Nullable(Type.Number({ description: 'spread limit at that corrected load, °C' })),
  worstGrade: Nullable(Grade),
  activeAlerts: Type.Integer({ description: 'open active alerts, not shelved' }),
  unacknowledged: Type.Integer(),
  shelvedAlerts: Type.Integer(),
  coverage: Nullable(Type.Object({ valid: Type.Integer(), total: Type.Integer() }, { description: 'valid thermocouples of the latest analysed ring' })),
});
export type FleetRow = Static<typeof FleetRow>;

export const FleetReply = Type.Object({ asOf: Type.String(), units: Type.Array(FleetRow) });

const LIVE_S = 300;

/** Freshness of a unit's data at nowMs, given the silent-unit time (0: the check is off). */
export function freshnessOf(lastRingTs: string | null, nowMs: number, silentS: number): { freshness: Freshness; ageS: number | null } {
  if (!lastRingTs) return { freshness: 'no_data', ageS: null };
  const ageS = Math.max(0, (nowMs - Date.parse(lastRingTs)) / 1000);
  const silent = silentS > 0 ? silentS : 3600;
  const live = Math.min(LIVE_S, silent / 3);
  return { freshness: ageS <= live ? 'live' : ageS <= silent ? 'late' : 'silent', ageS: Math.round(ageS) };
}

export function fleetRows(records: FleetRecord[], nowMs: number, silentS: number): FleetRow[] {
  return rankFleet(
    records.map((r) => {
      const f = freshnessOf(r.lastRingTs, nowMs, silentS);
      return {
        unitId: r.unitId,
        name: r.name,
        site: r.site,
        temperatureUnit: r.temperatureUnit,
        lastRingTs: r.lastRingTs,
        lastAnalysisTs: r.lastAnalysisTs,
        dataAgeS: f.ageS,
        freshness: f.freshness,
        loadFraction: r.loadFraction,
        spreadC: r.spreadC,
        spreadLimitC: r.spreadLimitC,
        worstGrade: r.worstGrade,
        activeAlerts: r.activeAlerts,
        unacknowledged: r.unacknowledged,
        shelvedAlerts: r.shelvedAlerts,
        coverage: r.validCount !== null && r.thermocoupleCount !== null ? { valid: r.validCount, total: r.thermocoupleCount } : null,
      };
    }),
  );
}

export async function fleetRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);
  const silentS = app.appConfig.alerts.unitSilentS;

  app.get('/v1/fleet', {
    schema: { tags: ['read'], summary: 'One row per unit, worst active alert first, with freshness, spread and coverage', response: { 200: FleetReply, ...readErrors } },
    config: { access: 'read' },
  }, async (request) => {
    const now = Date.now();
    const records = await reads.fleet(unitScope(request), now);
    return { asOf: new Date(now).toISOString(), units: fleetRows(records, now, silentS) };
  });

  app.get('/v1/fleet.svg', {
    schema: {
      tags: ['pictures'],
      summary: 'The fleet overview as an SVG picture (image/svg+xml)',
      produces: ['image/svg+xml'],
      response: { 200: Type.String({ description: 'SVG document' }), ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const now = Date.now();
    const rows = fleetRows(await reads.fleet(unitScope(request), now), now, silentS);
    return reply.header('content-type', 'image/svg+xml; charset=utf-8').send(fleetSvg(rows, now));
  });
}
