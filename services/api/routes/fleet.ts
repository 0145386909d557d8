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
import { createStartsRepository, type StartCountersRecord } from '../../db/starts.ts';
import { StartCounters } from './starts.ts';
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
  starts: StartCounters,
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

const NO_STARTS = { firedStarts: 0, failedStarts: 0, trips: 0, firedHours: 0, lastStartAt: null, lastStartOutcome: null };

export function fleetRows(records: FleetRecord[], nowMs: number, silentS: number, starts: ReadonlyMap<string, StartCountersRecord> = new Map()): FleetRow[] {
  return rankFleet(
    records.map((r) => {
      const c = starts.get(r.unitId);
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
        starts: c ? { firedStarts: c.firedStarts, failedStarts: c.failedStarts, trips: c.trips, firedHours: c.firedHours, lastStartAt: c.lastStartAt, lastStartOutcome: c.lastStartOutcome } : NO_STARTS,
      };
    }),
  );
}

/** Fleet records are reused while the fleet's fingerprint is unchanged, for at most this long. */
export const FLEET_CACHE_MS = 5_000;

export async function fleetRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);
  const silentS = app.appConfig.alerts.unitSilentS;
  // A wall screen or fifty dashboards polling the board: one fingerprint query per request
  // decides whether the records must be read again (they are, at the latest, every
  // FLEET_CACHE_MS); within one second of the clock and one fingerprint every caller gets the
  // same serialized body. Freshness comes from the clock of the second the body was made in.
  const startsRepo = createStartsRepository(app.pool);
  interface Entry { version: string; atMs: number; records: FleetRecord[]; starts: Map<string, StartCountersRecord>; second: number; body: Buffer | null }
  const cache = new Map<string, Entry>();
  async function body(scope: string[] | null, now: number): Promise<Buffer> {
    const key = scope === null ? '*' : [...scope].sort().join(',');
    const second = Math.floor(now / 1000);
    let e = cache.get(key);
    const version = await reads.fleetVersion();
    if (e && e.body !== null && e.second === second && e.version === version) return e.body;
    if (!e || e.version !== version || now - e.atMs >= FLEET_CACHE_MS) {
      const [records, counters] = await Promise.all([reads.fleet(scope, now), startsRepo.counters(scope)]);
      if (cache.size > 200) cache.clear();
      e = { version, atMs: now, records, starts: new Map(counters.map((c) => [c.unitId, c])), second, body: null };
      cache.set(key, e);
    }
    const at = second * 1000;
    e.second = second;
    e.body = Buffer.from(JSON.stringify({ asOf: new Date(at).toISOString(), units: fleetRows(e.records, at, silentS, e.starts) }));
    return e.body;
  }

  app.get('/v1/fleet', {
    schema: { tags: ['read'], summary: 'One row per unit, worst active alert first, with freshness, spread and coverage', response: { 200: FleetReply, ...readErrors } },
    config: { access: 'read' },
  }, async (request, reply) => {
    return reply.header('content-type', 'application/json; charset=utf-8').send((await body(unitScope(request), Date.now())) as never);
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
    const rows = (JSON.parse((await body(unitScope(request), now)).toString()) as { units: FleetRow[] }).units;
    return reply.header('content-type', 'image/svg+xml; charset=utf-8').send(fleetSvg(rows, now));
  });
}
