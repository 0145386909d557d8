/**
 * The example request and reply of every operation in the OpenAPI document, recorded from
 * real calls on an invented scenario: Brackwater unit 2, a twelve-chamber unit with twenty
 * exhaust thermocouples, with a day of analysed rings (chamber 5 running cold), a baseline,
 * drift, alerts, a start, a webhook subscription and one real delivery to a local receiver.
 *
 * `npm run docs:examples` (RECORD_EXAMPLES=1) writes them to services/api/openapi-examples.json.
 * Every other run records them again and checks that the stored file covers the same
 * operations, so a route added without an example fails here; test/api/openapi.test.ts checks
 * each stored example against its schema.
 */
import http from 'node:http';
import type { AddressInfo } from 'node:net';
import { readFileSync, writeFileSync } from 'node:fs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { arcDistanceDeg, plumeAngleDeg, swirlDeg, thermocoupleAnglesDeg, type UnitConfig } from '../../services/core/index.ts';
import { insertAlerts, insertAnalyses, insertDriftStates, insertRollups, type SyntheticAnalysis, type SyntheticRollup } from '../../services/db/synthetic.ts';
import { deliverDueWebhooks } from '../../services/worker/alert-jobs.ts';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import type { Reply, SendOptions } from '../helpers/transport.ts';
import { AUTH_START_ID, seedStart } from '../starts/fixtures.ts';

const FILE = new URL('../../services/api/openapi-examples.json', import.meta.url);
const MIN = 60_000;
const HOUR = 3_600_000;
const DAY = 86_400_000;
const UNIT = 'brackwater-2';
const CONFIG: UnitConfig = {
  ratedPowerMw: 31.5,
  thermocouples: { count: 20, firstAngleDeg: 9 },
  chambers: { count: 12, firstAngleDeg: 15 },
  swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] },
  temperatureUnit: 'C',
};

interface Example {
  request?: unknown;
  /** The media type of a request sent as text (NDJSON, CSV). */
  requestType?: string;
  status: number;
  reply: unknown;
}

/** Keeps an example short: lists of objects cut to two, long text cut, numbers to 4 decimals. */
function trim(v: unknown): unknown {
  if (typeof v === 'number') return Number.isInteger(v) ? v : Math.round(v * 1e4) / 1e4;
  if (typeof v === 'string') return v.length > 600 ? v.slice(0, 600) + '…' : v;
  if (Array.isArray(v)) return (v.length > 2 && v.some((x) => x !== null && typeof x === 'object' && !Array.isArray(x)) ? v.slice(0, 2) : v).map(trim);
  if (v && typeof v === 'object') return Object.fromEntries(Object.entries(v).map(([k, x]) => [k, trim(x)]));
  return v;
}

/** Cold plume of `chamber` on the ring at `load`: readings in °C. */
function ring(chamber: number, load: number, depthC: number, level = 548): number[] {
  const at = plumeAngleDeg(CONFIG, chamber - 1, load);
  return Array.from(thermocoupleAnglesDeg(CONFIG), (a) => Math.round((level - depthC * Math.exp(-0.5 * (arcDistanceDeg(a, at) / 14) ** 2)) * 10) / 10);
}

async function seed(t: TestApp, nowMs: number): Promise<number> {
  const endMs = Math.floor(nowMs / MIN) * MIN - MIN;
  const rows: SyntheticAnalysis[] = [];
  for (let i = 239; i >= 0; i--) {
    const load = 0.82;
    const exhaust = ring(5, load, 26);
    const mean = exhaust.reduce((a, b) => a + b, 0) / exhaust.length;
    rows.push({
      tsMs: endMs - i * MIN,
      loadFraction: load,
      spreadC: Math.max(...exhaust) - Math.min(...exhaust),
      spreadLimitC: 38,
      validity: exhaust.map(() => 0),
      tcDeviationC: exhaust.map((x) => x - mean),
      tcResidualC: exhaust.map((x) => (x - mean) * 0.4),
      chamberDeviationC: Array.from({ length: 12 }, (_, k) => (k === 4 ? -21 : 1.9)),
      chamberResidualC: Array.from({ length: 12 }, (_, k) => (k === 4 ? -9.5 : 0.3)),
      swirlDeg: swirlDeg(CONFIG.swirl.curve, load),
      worstChamber: 5,
      worstLikelihood: 0.86,
      baselineVersion: 1,
      exhaustC: exhaust,
    });
  }
  await insertAnalyses(t.db.pool, UNIT, rows);
  const roll: SyntheticRollup[] = [];
  const dayEnd = Math.floor(endMs / DAY) * DAY;
  for (let d = 59; d >= 0; d--) {
    const tDay = dayEnd - d * DAY;
    roll.push({ period: 'day', metric: 'spread', bucketMs: tDay, means: [24 + (d % 5)], n: 1440, sd: 2.5 });
    roll.push({ period: 'day', metric: 'load_fraction', bucketMs: tDay, means: [0.8], n: 1440, sd: 0.05 });
    roll.push({ period: 'day', metric: 'chamber_residual', bucketMs: tDay, means: Array.from({ length: 12 }, (_, k) => (k === 4 ? -0.16 * (60 - d) : 0.2)), n: 1200, sd: 1.1 });
    roll.push({ period: 'day', metric: 'tc_invalid', bucketMs: tDay, means: Array(20).fill(0), n: 1440, sd: 0 });
  }
  const hourEnd = Math.floor(endMs / HOUR) * HOUR;
  for (let h = 24 * 7 - 1; h >= 0; h--) {
    const tHour = hourEnd - h * HOUR;
    roll.push({ period: 'hour', metric: 'spread', bucketMs: tHour, means: [27], n: 60, sd: 2 });
    roll.push({ period: 'hour', metric: 'load_fraction', bucketMs: tHour, means: [0.82], n: 60, sd: 0.01 });
    roll.push({ period: 'hour', metric: 'chamber_residual', bucketMs: tHour, means: Array.from({ length: 12 }, (_, k) => (k === 4 ? -9 - h / 100 : 0.2)), n: 60, sd: 1 });
  }
  await insertRollups(t.db.pool, UNIT, roll);
  return endMs;
}

/** Drift states against baseline version 1, as the nightly job leaves them. */
async function seedDrift(t: TestApp, endMs: number): Promise<void> {
  const lastDay = new Date(Math.floor(endMs / DAY) * DAY - DAY).toISOString().slice(0, 10);
  await insertDriftStates(t.db.pool, UNIT, 1, [
    ...Array.from({ length: 12 }, (_, k) => ({ subject: 'chamber' as const, index: k + 1, per30DaysC: k === 4 ? -4.8 : 0.05, intervalC: (k === 4 ? [-5.6, -4.0] : [-0.3, 0.4]) as [number, number], sigmaC: 1.1, lastValueC: k === 4 ? -9.5 : 0.3, lastDay, days: 60, cusum: k === 4 ? { upper: 0, lower: 8.2 } : { upper: 0.3, lower: 0.2 } })),
    ...Array.from({ length: 20 }, (_, k) => ({ subject: 'thermocouple' as const, index: k + 1, per30DaysC: 0.02, intervalC: [-0.2, 0.25] as [number, number], sigmaC: 0.8, lastValueC: 0.1, lastDay, days: 60 })),
  ]);
}

async function seedAlertsAndStarts(t: TestApp, endMs: number): Promise<void> {
  await insertAlerts(t.db.pool, UNIT, [
    { kind: 'chamber_cold', grade: 'alarm', chamber: 5, raisedAtMs: endMs - 40 * MIN, message: 'Chamber 5 runs 21 °C colder than the average chamber (9.5 °C below its normal at this load).', advice: 'Plan a borescope of chamber 5 and a look at its fuel nozzle at the next opportunity.' },
    { kind: 'chamber_drift', grade: 'warning', chamber: 5, raisedAtMs: endMs - 3 * DAY, message: 'Chamber 5 has been cooling by 4.8 °C per 30 days for two months.', advice: 'Trend chamber 5 before the outage; compare with its neighbours.' },
  ]);
  // A window in which chamber 5 was known to run cold across loads, for the swirl fit.
  const cal: SyntheticAnalysis[] = [];
  const calStart = endMs - 3 * DAY;
  for (let i = 0; i < 180; i++) {
    const load = 0.4 + (0.6 * i) / 179;
    cal.push({ tsMs: calStart + i * MIN, loadFraction: load, spreadC: 42, spreadLimitC: 38, validity: Array(20).fill(0), tcDeviationC: Array(20).fill(0), chamberDeviationC: Array(12).fill(0), swirlDeg: 0, exhaustC: ring(5, load, 40) });
  }
  await insertAnalyses(t.db.pool, UNIT, cal);
  await seedStart(t.db.pool, UNIT);
}

async function record(): Promise<Record<string, Example>> {
  const t = await createTestApp({ transport: 'socket', env: { CANSIGHT_WEBHOOK_ALLOW_HOSTS: '127.0.0.1' } });
  const out: Record<string, Example> = {};
  const received: Array<{ headers: http.IncomingHttpHeaders; body: string }> = [];
  const receiver = http.createServer((req, res) => {
    let body = '';
    req.on('data', (c) => (body += c));
    req.on('end', () => {
      received.push({ headers: req.headers, body });
      res.writeHead(204).end();
    });
  });
  await new Promise<void>((r) => receiver.listen(0, '127.0.0.1', r));
  try {
    const call = async (route: string, o: SendOptions & { key?: string }, keep = true): Promise<Reply> => {
      const res = await t.send({ ...o, headers: { ...(o.key === '' ? {} : bearer(o.key ?? t.keys.admin)), ...(o.headers ?? {}) } });
      if (res.statusCode >= 300) throw new Error(`${route}: ${res.statusCode} ${res.body}`);
      const type = String(res.headers['content-type'] ?? '');
      const reply = res.statusCode === 204 ? null : type.includes('json') ? res.json() : res.body;
      const requestType = typeof o.payload === 'string' ? o.headers?.['content-type'] : undefined;
      if (keep) out[route] = { ...(o.payload !== undefined ? { request: o.payload } : {}), ...(requestType ? { requestType } : {}), status: res.statusCode, reply: trim(reply) };
      return res;
    };
    const now = Date.now();
    const unit = { id: UNIT, name: 'Brackwater unit 2', site: 'Brackwater', family: 'brackwater-twelve', ...CONFIG };
    await call('POST /v1/units', { method: 'POST', url: '/v1/units', payload: unit });
    await call('GET /v1/units', { url: '/v1/units', key: t.keys.viewer });
    await call('GET /v1/units/:unitId', { url: `/v1/units/${UNIT}`, key: t.keys.viewer });
    await call('PATCH /v1/units/:unitId', { method: 'PATCH', url: `/v1/units/${UNIT}`, payload: { name: 'Brackwater unit 2 (peaking)' } });
    const early = now - 10 * DAY;
    const ringAt = (ms: number) => ({ ts: new Date(ms).toISOString().replace('.000Z', 'Z'), loadMw: 25.8, ambientC: 11.5, ambientKPa: 100.6, speedPct: 100, exhaustC: ring(5, 0.82, 26) });
    await call('POST /v1/units/:unitId/rings', { method: 'POST', url: `/v1/units/${UNIT}/rings`, key: t.keys.ingest, payload: { rings: [ringAt(early), { ...ringAt(early + MIN), mode: 'premix' }] } });
    const lines = [ringAt(early + 2 * MIN), ringAt(early + 3 * MIN)].map((r) => JSON.stringify({ unitId: UNIT, ...r })).join('\n') + '\n';
    await call('POST /v1/rings', { method: 'POST', url: '/v1/rings', key: t.keys.ingest, headers: { 'content-type': 'application/x-ndjson' }, payload: lines });
    const endMs = await seed(t, now);
    // A real fit over the analysed day (201), then what the nightly drift job would leave.
    await call('POST /v1/units/:unitId/baselines', { method: 'POST', url: `/v1/units/${UNIT}/baselines`, payload: { from: new Date(endMs - 4 * HOUR).toISOString().replace('.000Z', 'Z'), to: new Date(endMs + MIN).toISOString().replace('.000Z', 'Z') } });
    await seedDrift(t, endMs);
    await seedAlertsAndStarts(t, endMs);

    await call('GET /health', { url: '/health', key: '' });
    await call('GET /ready', { url: '/ready', key: '' });
    await call('GET /v1/whoami', { url: '/v1/whoami', key: t.keys.viewer });
    await call('GET /v1/fleet', { url: '/v1/fleet', key: t.keys.viewer });
    await call('GET /v1/fleet.svg', { url: '/v1/fleet.svg', key: t.keys.viewer });
    await call('GET /v1/units/:unitId/status', { url: `/v1/units/${UNIT}/status`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/analysis', { url: `/v1/units/${UNIT}/analysis?every=1h&from=${new Date(now - 6 * HOUR).toISOString()}`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/chambers', { url: `/v1/units/${UNIT}/chambers`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/chambers/:chamber/trend', { url: `/v1/units/${UNIT}/chambers/5/trend?every=1d&from=${new Date(now - 10 * DAY).toISOString()}`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/thermocouples', { url: `/v1/units/${UNIT}/thermocouples`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/ring.svg', { url: `/v1/units/${UNIT}/ring.svg`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/chambers/:chamber/trend.svg', { url: `/v1/units/${UNIT}/chambers/5/trend.svg`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/spread.svg', { url: `/v1/units/${UNIT}/spread.svg`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/review', { url: `/v1/units/${UNIT}/review?format=csv`, key: t.keys.viewer });
    await call('POST /v1/units/:unitId/swirl/calibrate', { method: 'POST', url: `/v1/units/${UNIT}/swirl/calibrate`, key: t.keys.viewer, payload: { from: new Date(now - 3 * DAY - 2 * MIN).toISOString(), to: new Date(now - 2 * DAY).toISOString(), chamber: 5 } });
    await call('POST /v1/units/:unitId/swirl/what-if', { method: 'POST', url: `/v1/units/${UNIT}/swirl/what-if`, key: t.keys.viewer, payload: { from: new Date(endMs - 4 * HOUR).toISOString().replace('.000Z', 'Z'), to: new Date(endMs + MIN).toISOString().replace('.000Z', 'Z'), curve: [[0.3, 107], [0.6, 89], [1.0, 70]] } });
    await call('POST /v1/units/:unitId/events', { method: 'POST', url: `/v1/units/${UNIT}/events`, key: t.keys.operator, payload: { kind: 'thermocouple_replaced', at: new Date(endMs - 2 * HOUR).toISOString().replace('.000Z', 'Z'), by: 'instrument technician', note: 'Probe 11 read erratic; probe and lead replaced, same class 2 type K.', thermocouples: [11] } });
    await call('GET /v1/units/:unitId/events', { url: `/v1/units/${UNIT}/events`, key: t.keys.viewer });
    await call('DELETE /v1/units/:unitId/events/:eventId', { method: 'DELETE', url: `/v1/units/${UNIT}/events/${(await call('', { method: 'POST', url: `/v1/units/${UNIT}/events`, key: t.keys.operator, payload: { kind: 'other', at: new Date(endMs).toISOString(), by: 'shift operator 1', note: 'recorded on the wrong unit' } }, false)).json().id}` });
    await call('GET /v1/units/:unitId/baselines', { url: `/v1/units/${UNIT}/baselines`, key: t.keys.viewer });
    await call('GET /v1/fleet/families/:family', { url: '/v1/fleet/families/brackwater-twelve', key: t.keys.viewer });
    await call('GET /v1/fleet/families/:family/family.svg', { url: '/v1/fleet/families/brackwater-twelve/family.svg', key: t.keys.viewer });
    await call('GET /v1/units/:unitId/starts', { url: `/v1/units/${UNIT}/starts?from=2025-12-31T00:00:00Z&to=2026-01-02T00:00:00Z`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/starts/trend.svg', { url: `/v1/units/${UNIT}/starts/trend.svg?from=2025-12-31T00:00:00Z&to=2026-01-02T00:00:00Z`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/starts/:startId', { url: `/v1/units/${UNIT}/starts/${AUTH_START_ID}`, key: t.keys.viewer });
    await call('GET /v1/units/:unitId/starts/:startId/start.svg', { url: `/v1/units/${UNIT}/starts/${AUTH_START_ID}/start.svg`, key: t.keys.viewer });

    const port = (receiver.address() as AddressInfo).port;
    const hook = (await call('POST /v1/webhooks', { method: 'POST', url: '/v1/webhooks', payload: { url: `https://alerts.brackwater.example/cansight`, minGrade: 'warning', secret: 'brackwater-shared-secret-2026' } })).json();
    // The recorded subscription names an invented address; a second one reaches the local receiver.
    const local = (await call('', { method: 'POST', url: '/v1/webhooks', payload: { url: `http://127.0.0.1:${port}/hook`, minGrade: 'warning', secret: 'brackwater-shared-secret-2026' } }, false)).json();
    await call('GET /v1/webhooks', { url: '/v1/webhooks' });
    const alerts = (await call('GET /v1/alerts', { url: `/v1/alerts?unitId=${UNIT}&state=active`, key: t.keys.viewer })).json().alerts;
    const id = alerts[0].id;
    await call('GET /v1/alerts/:id', { url: `/v1/alerts/${id}`, key: t.keys.viewer });
    await call('POST /v1/alerts/:id/ack', { method: 'POST', url: `/v1/alerts/${id}/ack`, key: t.keys.operator, payload: { by: 'shift operator 1', comment: 'Seen on the board; combustion engineer informed.' } });
    await call('POST /v1/alerts/:id/shelve', { method: 'POST', url: `/v1/alerts/${id}/shelve`, key: t.keys.operator, payload: { by: 'shift operator 1', until: new Date(now + 2 * DAY).toISOString().replace(/\.\d{3}Z$/, 'Z'), reason: 'Borescope of chamber 5 booked for Thursday.' } });
    await call('POST /v1/alerts/:id/unshelve', { method: 'POST', url: `/v1/alerts/${id}/unshelve`, key: t.keys.operator, payload: { by: 'shift operator 1' } });
    await call('POST /v1/alerts/:id/outcome', { method: 'POST', url: `/v1/alerts/${id}/outcome`, key: t.keys.operator, payload: { by: 'combustion engineer', outcome: 'confirmed', found: 'Chamber 5 fuel nozzle: two of six swirler passages half blocked with coke; nozzle replaced.', inspectedAt: new Date(now).toISOString().replace(/\.\d{3}Z$/, 'Z') } });
    await call('GET /v1/units/:unitId/outcomes', { url: `/v1/units/${UNIT}/outcomes`, key: t.keys.viewer });
    await call('GET /v1/fleet/outcomes', { url: '/v1/fleet/outcomes', key: t.keys.viewer });
    await deliverDueWebhooks(t.db.pool, new Date(), { webhooks: t.config.webhooks });
    const first = received.find((r) => r.body);
    if (!first) throw new Error('no webhook delivery reached the receiver');
    out['WEBHOOK alertChange'] = { request: JSON.parse(first.body), status: 204, reply: { headers: Object.fromEntries(Object.entries(first.headers).filter(([k]) => k.startsWith('x-cansight-') || k === 'content-type' || k === 'user-agent')) } };
    await call('GET /v1/webhooks/:id/deliveries', { url: `/v1/webhooks/${local.id}/deliveries` });
    out['GET /v1/webhooks/:id/deliveries'].reply = JSON.parse(JSON.stringify(out['GET /v1/webhooks/:id/deliveries'].reply).replaceAll(`http://127.0.0.1:${port}/hook`, 'https://alerts.brackwater.example/cansight'));
    await call('DELETE /v1/webhooks/:id', { method: 'DELETE', url: `/v1/webhooks/${hook.id}` });
  } finally {
    await new Promise((r) => receiver.close(r));
    await t.close();
  }
  return out;
}

describe('the recorded examples of the OpenAPI document', () => {
  let recorded: Record<string, Example>;
  beforeAll(async () => {
    recorded = await record();
    if (process.env.RECORD_EXAMPLES === '1') {
      writeFileSync(FILE, JSON.stringify({ scenario: 'Brackwater unit 2 (invented): see test/docs/examples.test.ts', examples: recorded }, null, 1) + '\n');
    }
  }, 120_000);
  afterAll(() => undefined);

  it('cover every operation the stored file covers, and the webhook delivery (re-record with npm run docs:examples)', () => {
    const stored = JSON.parse(readFileSync(FILE, 'utf8')).examples as Record<string, Example>;
    expect(Object.keys(stored).sort()).toEqual(Object.keys(recorded).sort());
    expect(recorded['WEBHOOK alertChange'].reply).toMatchObject({ headers: { 'x-cansight-signature': expect.stringMatching(/^sha256=[0-9a-f]{64}$/) } });
  });
});
