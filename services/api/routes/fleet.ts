/**
 * The fleet: GET /v1/fleet (one row per unit in the key's scope, worst first: worst active
 * alert, data freshness, spread against its limit, coverage) and GET /v1/fleet.svg (the same as
 * a picture for a wall screen or for printing).
 */
import { promisify } from 'node:util';
import { gzip } from 'node:zlib';
import negotiate from '@fastify/accept-negotiator';
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type Static } from 'typebox';
import { unitScope } from '../../http/auth.ts';
import { fleetSvg, rankFleet, type Freshness } from '../svg/fleet.ts';
import type { FleetRecord, FleetStarts } from '../../db/reads.ts';
import { StartCounters } from './starts.ts';
import { coalesced, readErrors, readsOf, snapshotOf } from './read-common.ts';

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

function fleetRow(r: FleetRecord, c: FleetStarts | undefined, f: { freshness: Freshness; ageS: number | null }): FleetRow {
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
}

export function fleetRows(records: FleetRecord[], nowMs: number, silentS: number, starts: ReadonlyMap<string, FleetStarts> = new Map()): FleetRow[] {
  return rankFleet(records.map((r) => fleetRow(r, starts.get(r.unitId), freshnessOf(r.lastRingTs, nowMs, silentS))));
}

const CLOCK_FIELDS = ',"dataAgeS":0,"freshness":"live"';

/**
 * Each record's JSON pieces, kept while the record object lives: a board refreshed for a few
 * changed units serializes those units' rows only. Records are never changed in place.
 */
const piecesOf = new WeakMap<FleetRecord, { starts: FleetStarts | undefined; head: string; tail: string }>();

/**
 * The reply body of one set of fleet records at any instant, as the bytes of
 * JSON.stringify({ asOf, units: fleetRows(records, atMs, silentS, starts) }). Each row's JSON is
 * made once, in two pieces around the fields that follow the clock (dataAgeS, freshness), and
 * the ranking is kept while no unit turns silent or stops being silent: a new second costs the
 * joining of the pieces, not the serialization and ranking of the whole fleet.
 */
export function fleetBodyMaker(records: FleetRecord[], silentS: number, starts: ReadonlyMap<string, FleetStarts> = new Map()): (atMs: number) => Buffer {
  const pieces = records.map((r) => {
    const c = starts.get(r.unitId);
    const known = piecesOf.get(r);
    if (known && known.starts === c) return known;
    const json = JSON.stringify(fleetRow(r, c, { freshness: 'live', ageS: 0 }));
    // Keys and quotes inside string values are escaped, so the marker occurs once, where the fields are.
    const at = json.indexOf(CLOCK_FIELDS);
    const made = { starts: c, head: json.slice(0, at) + ',"dataAgeS":', tail: json.slice(at + CLOCK_FIELDS.length) };
    piecesOf.set(r, made);
    return made;
  });
  let order: number[] | null = null;
  let silentBefore: boolean[] = [];
  return (atMs) => {
    const fresh = records.map((r) => freshnessOf(r.lastRingTs, atMs, silentS));
    const silent = fresh.map((f) => f.freshness === 'silent');
    if (order === null || silent.some((v, i) => v !== silentBefore[i])) {
      const keys = records.map((r, i) => ({ i, unitId: r.unitId, worstGrade: r.worstGrade, spreadC: r.spreadC, spreadLimitC: r.spreadLimitC, freshness: fresh[i].freshness }));
      order = rankFleet(keys).map((k) => k.i);
      silentBefore = silent;
    }
    const parts: string[] = [`{"asOf":"${new Date(atMs).toISOString()}","units":[`];
    for (let k = 0; k < order.length; k++) {
      const i = order[k];
      const f = fresh[i];
      parts.push(k === 0 ? '' : ',', pieces[i].head, f.ageS === null ? 'null' : String(f.ageS), ',"freshness":"', f.freshness, '"', pieces[i].tail);
    }
    parts.push(']}');
    return Buffer.from(parts.join(''));
  };
}

/**
 * After a write, the rows of units whose version (fleetUnitVersions) is unchanged are reused, and
 * only the changed units are read again, for at most this long since every row was last read
 * (the latest stored ring of a unit changes no version).
 */
export const FLEET_CACHE_MS = 5_000;

/** More changed units than this share of the fleet (or 50, if more) and every row is read again. */
const PARTIAL_READ_SHARE = 0.25;

/** What GET /v1/fleet promises about how fresh its rows are (also in README, "The API"). */
export const FLEET_FRESHNESS =
  'Every read reflects every alert action, analysed ring, start, unit and configuration change committed before it. ' +
  'A ring stored but not yet analysed may show in lastRingTs, dataAgeS and freshness up to 5 s late. ' +
  'dataAgeS and freshness are computed at asOf, the start of the current second.';

const gzipAsync = promisify(gzip);
const ENCODINGS = ['gzip', 'identity'];
/** zlib's default level: the 1,000-unit board of the benchmark (482 kB) comes to about 13.5 kB. */
const GZIP_LEVEL = 6;

export async function fleetRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);
  const snapshot = snapshotOf(app);
  const silentS = app.appConfig.alerts.unitSilentS;
  // A wall screen or fifty dashboards polling the board. Each request reads the database's
  // commit snapshot (one trivial query, shared by the requests that arrive while one is under
  // way): while it equals the snapshot the entry holds, nothing has been written since and the
  // records are exact. Otherwise one refresh per scope (shared the same way) reads each unit's
  // version: the units whose version changed are read again and their rows replace the old ones
  // (a worker committing a batch, or an operator acknowledging an alert, costs a read of that
  // unit); the rest are kept, for at most FLEET_CACHE_MS since every row was read, when all are
  // read again (with the latest stored rings). A shelf running out or a configuration version
  // taking effect ends the records' validity at that instant. The versions are read before the
  // rows, so a row is never older than the version kept for it: a unit that changes in between
  // is read again next time, never missed. Within one second every caller gets the same body,
  // with freshness from the clock of that second.
  interface Entry {
    /** The commit snapshot of `versions`; every record is at least as new. */
    snapshot: string;
    versions: Map<string, string>;
    fullReadAtMs: number;
    validUntilMs: number;
    records: FleetRecord[];
    starts: Map<string, FleetStarts>;
    make: ((atMs: number) => Buffer) | null;
    second: number;
    body: Buffer | null;
    /** The body of `second`, gzip-compressed, once a client that accepts gzip asked for it. */
    gzipped: Promise<Buffer> | null;
    gzippedSecond: number;
  }
  const cache = new Map<string, Entry>();
  const refreshers = new Map<string, () => Promise<Entry>>();

  const entry = (e: Pick<Entry, 'snapshot' | 'versions' | 'fullReadAtMs' | 'validUntilMs' | 'records' | 'starts'>): Entry =>
    ({ ...e, make: null, second: -1, body: null, gzipped: null, gzippedSecond: -1 });

  async function fullRead(scope: string[] | null, now: number): Promise<Entry> {
    const v = await reads.fleetUnitVersions(scope);
    const st = await reads.fleetState(scope, now);
    return entry({ snapshot: v.snapshot, versions: v.versions, fullReadAtMs: now, validUntilMs: st.changesAtMs ?? Infinity, records: st.records, starts: st.starts });
  }

  async function refresh(old: Entry | undefined, scope: string[] | null): Promise<Entry> {
    const now = Date.now();
    if (!old || now >= old.validUntilMs || now - old.fullReadAtMs >= FLEET_CACHE_MS) return fullRead(scope, now);
    const v = await reads.fleetUnitVersions(scope);
    const changed: string[] = [];
    for (const [id, version] of v.versions) if (old.versions.get(id) !== version) changed.push(id);
    const gone = old.records.filter((r) => !v.versions.has(r.unitId)).map((r) => r.unitId);
    const keptUntil = Math.min(old.validUntilMs, old.fullReadAtMs + FLEET_CACHE_MS);
    if (changed.length === 0 && gone.length === 0) {
      // Nothing the rows show has changed: the same records, now known exact at this snapshot.
      old.snapshot = v.snapshot;
      old.validUntilMs = keptUntil;
      return old;
    }
    if (changed.length > Math.max(50, PARTIAL_READ_SHARE * v.versions.size)) return fullRead(scope, now);
    const part = changed.length > 0 ? await reads.fleetState(changed, now) : null;
    const records = new Map(old.records.map((r) => [r.unitId, r]));
    const starts = new Map(old.starts);
    for (const id of [...gone, ...changed]) {
      records.delete(id);
      starts.delete(id);
    }
    for (const r of part?.records ?? []) {
      records.set(r.unitId, r);
      const c = part!.starts.get(r.unitId);
      if (c) starts.set(r.unitId, c);
    }
    return entry({
      snapshot: v.snapshot,
      versions: v.versions,
      fullReadAtMs: old.fullReadAtMs,
      validUntilMs: Math.min(keptUntil, part?.changesAtMs ?? Infinity),
      records: [...records.values()],
      starts,
    });
  }

  function refresher(key: string, scope: string[] | null): () => Promise<Entry> {
    let r = refreshers.get(key);
    if (r) return r;
    if (refreshers.size > 200) {
      refreshers.clear();
      cache.clear();
    }
    r = coalesced(async () => {
      const e = await refresh(cache.get(key), scope);
      cache.set(key, e);
      return e;
    });
    refreshers.set(key, r);
    return r;
  }

  async function current(scope: string[] | null): Promise<Entry> {
    const key = scope === null ? '*' : [...scope].sort().join(',');
    const snap = await snapshot();
    const e = cache.get(key);
    if (e && e.snapshot === snap && Date.now() < e.validUntilMs) return e;
    return refresher(key, scope)();
  }

  function body(e: Entry, now: number): Buffer {
    const second = Math.floor(now / 1000);
    if (e.body === null || e.second !== second) {
      e.make ??= fleetBodyMaker(e.records, silentS, e.starts);
      e.body = e.make(second * 1000);
      e.second = second;
    }
    return e.body;
  }

  // The board of a large fleet is hundreds of kilobytes of repetitive JSON; browsers and
  // gateways accept gzip, which makes it about a thirty-fifth. It is compressed once per second (the
  // body's own lifetime), off the event loop, and shared by every request of that second.
  function gzippedBody(e: Entry, now: number): Promise<Buffer> {
    const plain = body(e, now);
    if (e.gzipped === null || e.gzippedSecond !== e.second) {
      e.gzipped = gzipAsync(plain, { level: GZIP_LEVEL });
      e.gzippedSecond = e.second;
    }
    return e.gzipped;
  }

  app.get('/v1/fleet', {
    schema: {
      tags: ['read'],
      summary: 'One row per unit, worst active alert first, with freshness, spread and coverage',
      description: FLEET_FRESHNESS,
      response: { 200: FleetReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const e = await current(unitScope(request));
    reply.header('content-type', 'application/json; charset=utf-8').header('vary', 'accept-encoding');
    const accept = request.headers['accept-encoding'];
    if (accept && negotiate(accept, ENCODINGS) === 'gzip') {
      return reply.header('content-encoding', 'gzip').send((await gzippedBody(e, Date.now())) as never);
    }
    return reply.send(body(e, Date.now()) as never);
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
    const e = await current(unitScope(request));
    const now = Date.now();
    const rows = fleetRows(e.records, Math.floor(now / 1000) * 1000, silentS, e.starts);
    return reply.header('content-type', 'image/svg+xml; charset=utf-8').send(fleetSvg(rows, now));
  });
}
