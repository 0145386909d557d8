/**
 * Fleet comparison by configuration family (the `family` field of a unit):
 *   GET /v1/fleet/families/:family?load&band&days        the units side by side, ranked
 *   GET /v1/fleet/families/:family/family.svg?load&band&days   the same as a picture
 * Each unit's chamber residuals (against its own baseline), drift rates and its spread at one
 * corrected load; for every chamber position the units ranked coldest first
 * (core/family.ts). Only units with the family's chamber and thermocouple count are compared;
 * the others are listed as left out, with the reason. Units outside the key's scope are not seen.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { ADVISORY_CAUTION } from '../../core/findings.ts';
import { compareFamily } from '../../core/family.ts';
import { median } from '../../core/stats.ts';
import type { UnitRecord } from '../../db/units.ts';
import { unitScope } from '../../http/auth.ts';
import { notFound } from '../../http/errors.ts';
import { Family } from '../schemas.ts';
import { familySvg } from '../svg/family.ts';
import { chamberFigures } from './chambers.ts';
import { readErrors, readsOf } from './read-common.ts';

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);
const NumList = Type.Array(Nullable(Type.Number()), { description: 'per chamber, index 0 = chamber 1' });

const Params = Type.Object({ family: Family });
const Query = Type.Object(
  {
    load: Type.Optional(Type.Number({ minimum: 0.1, maximum: 1.2, description: 'corrected load at which spreads are compared, fraction of the ISO rating; default the median of the units\' latest corrected loads' })),
    band: Type.Optional(Type.Number({ minimum: 0.01, maximum: 0.3, description: 'half-width of the load band around `load`, fraction; default 0.05' })),
    days: Type.Optional(Type.Integer({ minimum: 1, maximum: 90, description: 'days up to each unit\'s latest analysed ring over which its spread at that load is taken (median of steady rings); default 7' })),
  },
  { additionalProperties: false },
);

const FamilyUnit = Type.Object({
  rank: Type.Integer({ description: '1 = the unit whose coldest chamber stands furthest below the family at its position' }),
  unitId: Type.String(),
  name: Type.String(),
  site: Type.String(),
  latestTs: Nullable(Type.String({ description: 'latest analysed ring' })),
  baselineVersion: Nullable(Type.Integer()),
  residualsC: NumList,
  driftCPer30d: NumList,
  spreadC: Nullable(Type.Number({ description: 'median spread of steady rings in the load band, °C' })),
  spreadRings: Type.Integer({ description: 'steady rings in the load band behind spreadC' }),
  spreadRank: Nullable(Type.Integer({ description: '1 = widest spread at the reference load' })),
  coldestChamber: Nullable(Type.Integer({ description: 'its chamber furthest below the family at that position, numbered from 1' })),
  coldestResidualC: Nullable(Type.Number()),
  coldestRankAtPosition: Nullable(Type.Integer({ description: 'rank of that chamber among the family\'s units at the same position; 1 = coldest' })),
  coldestZ: Nullable(Type.Number({ description: 'how far below the family median at that position, in robust σ of the family there (three units or more)' })),
  fastestCoolingChamber: Nullable(Type.Integer()),
  fastestCoolingCPer30d: Nullable(Type.Number()),
});

const Position = Type.Object({
  chamber: Type.Integer(),
  familyMedianC: Nullable(Type.Number()),
  familySigmaC: Nullable(Type.Number({ description: 'MAD × 1.4826 of the residuals at this position, three units or more' })),
  ranking: Type.Array(Type.Object({ unitId: Type.String(), residualC: Nullable(Type.Number()), rank: Nullable(Type.Integer()), belowFamilyC: Nullable(Type.Number()) }), { description: 'coldest first' }),
});

const FamilyReply = Type.Object({
  family: Type.String(),
  chambers: Type.Integer(),
  thermocouples: Type.Integer(),
  referenceLoad: Type.Object({ fraction: Type.Number(), bandFraction: Type.Number(), days: Type.Integer() }),
  units: Type.Array(FamilyUnit),
  positions: Type.Array(Position),
  excluded: Type.Array(Type.Object({ unitId: Type.String(), reason: Type.String() }), { description: 'units of the family left out of the comparison' }),
  caution: Type.String(),
});

/** The most common (chamber count, thermocouple count) of the units: the family's design. */
function designOf(units: UnitRecord[]): { chambers: number; thermocouples: number } {
  const tally = new Map<string, number>();
  for (const u of units) {
    const k = `${u.config.chambers.count}/${u.config.thermocouples.count}`;
    tally.set(k, (tally.get(k) ?? 0) + 1);
  }
  const [ch, tc] = [...tally].sort((a, b) => b[1] - a[1] || a[0].localeCompare(b[0]))[0][0].split('/').map(Number);
  return { chambers: ch, thermocouples: tc };
}

export async function familyRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);
  const settings = app.appConfig.worker;

  async function compare(family: string, q: { load?: number; band?: number; days?: number }, scope: string[] | null) {
    const all = await app.repos.units.family(family, scope);
    if (all.length === 0) throw notFound(`No unit of family ${family}${scope ? ' within this key\'s units' : ''}. Give units a family with PATCH /v1/units/{unitId} {"family": "${family}"}.`);
    const design = designOf(all);
    const excluded = all
      .filter((u) => u.config.chambers.count !== design.chambers || u.config.thermocouples.count !== design.thermocouples)
      .map((u) => ({ unitId: u.id, reason: `${u.config.chambers.count} chambers and ${u.config.thermocouples.count} thermocouples; the family's design has ${design.chambers} and ${design.thermocouples}` }));
    const members = all.filter((u) => !excluded.some((x) => x.unitId === u.id));
    const now = Date.now();
    const figures = await Promise.all(members.map((u) => chamberFigures(reads, u, now, settings)));
    const loads = figures.map((f) => f.latest?.loadFraction ?? null).filter((v): v is number => v !== null && Number.isFinite(v));
    const load = q.load ?? (loads.length ? Math.round(median(loads) * 100) / 100 : 0.9);
    const band = q.band ?? 0.05;
    const days = q.days ?? 7;
    const spreads = await reads.spreadAtLoad(members.map((u) => u.id), load - band, load + band, days);
    const input = members.map((u, i) => ({
      unitId: u.id,
      residualsC: figures[i].chambers.map((c) => c.residualC),
      driftCPer30d: figures[i].chambers.map((c) => c.driftCPer30d),
      spreadC: spreads.get(u.id)?.spreadC ?? null,
    }));
    const cmp = compareFamily(input, design.chambers);
    const byId = new Map(members.map((u, i) => [u.id, { u, f: figures[i], x: input[i] }]));
    return {
      family,
      chambers: design.chambers,
      thermocouples: design.thermocouples,
      referenceLoad: { fraction: load, bandFraction: band, days },
      units: cmp.units.map((s) => {
        const { u, f, x } = byId.get(s.unitId)!;
        return { ...s, name: u.name, site: u.site, latestTs: f.latest?.ts ?? null, baselineVersion: f.latest?.baselineVersion ?? null, residualsC: [...x.residualsC], driftCPer30d: [...x.driftCPer30d], spreadC: x.spreadC, spreadRings: spreads.get(u.id)?.rings ?? 0 };
      }),
      positions: cmp.positions,
      excluded,
      caution: ADVISORY_CAUTION,
      temperatureUnit: members.every((u) => u.config.temperatureUnit === 'F') ? ('F' as const) : ('C' as const),
    };
  }

  app.get('/v1/fleet/families/:family', {
    schema: {
      tags: ['read'],
      summary: 'Units of one configuration family side by side: chamber residuals, spread at one corrected load and drift rates, ranked',
      params: Params,
      querystring: Query,
      response: { 200: FamilyReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request) => {
    const { temperatureUnit: _u, ...reply } = await compare(request.params.family, request.query, unitScope(request));
    return reply;
  });

  app.get('/v1/fleet/families/:family/family.svg', {
    schema: {
      tags: ['pictures'],
      summary: 'A configuration family side by side as an SVG picture (image/svg+xml)',
      produces: ['image/svg+xml'],
      params: Params,
      querystring: Query,
      response: { 200: Type.String({ description: 'SVG document' }), ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const r = await compare(request.params.family, request.query, unitScope(request));
    const svg = familySvg({
      family: r.family,
      chambers: r.chambers,
      temperatureUnit: r.temperatureUnit,
      referenceLoad: r.referenceLoad,
      units: r.units,
      coldestAt: r.positions.map((p) => p.ranking[0]?.rank === 1 ? p.ranking[0].unitId : null),
    });
    return reply.header('content-type', 'image/svg+xml; charset=utf-8').send(svg);
  });
}
