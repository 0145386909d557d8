/**
 * Start-up analysis through the worker and the API, on a real PostgreSQL: simulated rings of a
 * peaking unit (a chamber lighting late on one start, a chamber never lighting on another) are
 * stored as ingest stores them and analysed batch by batch by the pipeline; the starts table
 * then holds every start with the same phases as the batch detector finds, the start counters
 * are right, chamber_unlit and start_failed alerts are raised through the alert rules and
 * return to normal once a later start lights every chamber; the start routes serve the list,
 * one start and its picture.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { XMLParser } from 'fast-xml-parser';
import { defaultThresholds } from '../../services/core/findings.ts';
import { detectStarts } from '../../services/core/start-detector.ts';
import { ensureProgressRows } from '../../services/db/progress.ts';
import { createLogger } from '../../services/db/logger.ts';
import { createStartsRepository } from '../../services/db/starts.ts';
import { buildScenario } from '../../services/sim/scenarios.ts';
import { simulateUnit } from '../../services/sim/generator.ts';
import { analyseNextBatch, type PipelineContext } from '../../services/worker/pipeline.ts';
import { deadbandThresholds, loadAlertSettings } from '../../services/worker/alerts.ts';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { registerUnit, testConfig, writeRings } from '../worker/fixtures.ts';
import { matchStart, startRings } from './helpers.ts';

const scenario = buildScenario('starts', { days: 7 });
const unit = { ...scenario.units[0], config: { ...scenario.units[0].config, id: 'start-w1' } };
const sim = simulateUnit(unit, { from: scenario.from, to: scenario.to, seed: 21 });
const batch = sim.batch();
const truth = sim.truth;

let t: TestApp;
beforeAll(async () => {
  t = await createTestApp();
  await registerUnit(t.db.pool, unit);
  await writeRings(t.db.pool, batch, 0, batch.count, false);
  const config = testConfig({ CANSIGHT_WORKER_BATCH_RINGS: '2500' });
  const alertSettings = loadAlertSettings(config);
  const pc: PipelineContext = {
    pool: t.db.pool, logger: createLogger('silent'), config, workerId: null, alertSettings,
    raise: defaultThresholds, hold: deadbandThresholds(defaultThresholds, alertSettings), memory: new Map(),
  };
  await ensureProgressRows(t.db.pool, [unit.config.id], new Date());
  for (let i = 0; i < 1000; i++) {
    const r = await analyseNextBatch(pc, unit.config.id);
    if (r.status !== 'more') break;
  }
}, 600_000);
afterAll(async () => t?.close());

describe('start-up analysis in the worker', () => {
  it('stores every start with the outcome and phases the batch detector finds', async () => {
    const stored = await createStartsRepository(t.db.pool).list(unit.config.id, scenario.from, scenario.to + 1, 1000);
    const { starts } = detectStarts(unit.config, startRings(batch));
    expect(truth.starts.length).toBeGreaterThanOrEqual(6);
    expect(stored.length).toBe(truth.starts.length);
    for (const st of truth.starts) {
      const d = matchStart(starts, st, 5)!;
      const row = stored.find((x) => x.startId === d.id)!;
      expect(row, st.id).toBeDefined();
      expect(row.outcome).toBe(st.outcome);
      // The ring table keeps speeds and loads as 4-byte reals: instants fitted to them may move by a fraction of a second.
      expect(row.phases.map((p) => p.phase)).toEqual(d.phases.map((p) => p.phase));
      row.phases.forEach((p, k) => expect(Math.abs(Date.parse(p.startAt) - d.phases[k].startMs)).toBeLessThan(1000));
    }
  });

  it('keeps the start counters', async () => {
    const [c] = await createStartsRepository(t.db.pool).counters([unit.config.id]);
    expect(c.firedStarts).toBe(truth.starts.length);
    expect(c.failedStarts).toBe(truth.starts.filter((s) => s.outcome === 'aborted').length);
    expect(c.trips).toBe(0);
    expect(c.firedHours).toBeGreaterThan(10);
    expect(c.lastStartAt).not.toBeNull();
  });

  it('raises chamber_unlit for the unlit chamber and start_failed through the alert rules, and returns them to normal after a later good start', async () => {
    const never = truth.starts.find((s) => s.unlitChamber === 8)!;
    const late = truth.starts.find((s) => s.unlitChamber === 5)!;
    const { rows } = await t.db.pool.query(`SELECT kind, chamber, grade, active, raised_at, cleared_at, runner_up_chamber, evidence FROM alerts WHERE unit_id = $1 ORDER BY raised_at`, [unit.config.id]);
    const unlit8 = rows.find((r) => r.kind === 'chamber_unlit' && r.chamber === 8);
    const unlit5 = rows.find((r) => r.kind === 'chamber_unlit' && r.chamber === 5);
    const failed = rows.find((r) => r.kind === 'start_failed');
    expect(unlit8).toBeDefined();
    expect(unlit8.grade).toBe('alarm');
    expect([7, 9]).toContain(unlit8.runner_up_chamber);
    expect(unlit5).toBeDefined();
    expect(unlit5.grade).toBe('warning');
    expect(failed).toBeDefined();
    expect(failed.evidence.stoppedIn).toBe('acceleration');
    // Raised at the end of their starts (ring time).
    expect(unlit8.raised_at.getTime()).toBeGreaterThanOrEqual(Date.parse(never.crankAt));
    expect(unlit5.raised_at.getTime()).toBeGreaterThanOrEqual(Date.parse(late.crankAt));
    // A later start lit every chamber: each returned to normal after it.
    const after = (s: typeof never) => truth.starts.find((x) => Date.parse(x.crankAt) > Date.parse(s.crankAt) && x.unlitChamber === undefined);
    for (const [a, s] of [[unlit8, never], [unlit5, late], [failed, never]] as const) {
      const next = after(s);
      if (!next) continue;
      expect(a.active, a.kind).toBe(false);
      expect(a.cleared_at.getTime()).toBeGreaterThan(Date.parse(next.crankAt));
    }
    // No start finding on a normal start.
    expect(rows.filter((r) => r.kind === 'chamber_unlit').length).toBe(2);
  });
});

describe('start routes', () => {
  const parser = new XMLParser({ ignoreAttributes: false });

  it('lists the starts newest first, with the counters', async () => {
    const res = await t.app.inject({ url: `/v1/units/${unit.config.id}/starts?from=${new Date(scenario.from).toISOString()}&to=${new Date(scenario.to).toISOString()}`, headers: bearer(t.keys.viewer) });
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(body.starts.length).toBe(truth.starts.length);
    const cranks = body.starts.map((s: { crankAt: string }) => Date.parse(s.crankAt));
    expect([...cranks].sort((a, b) => b - a)).toEqual(cranks);
    expect(body.counters.firedStarts).toBe(truth.starts.length);
    const aborted = body.starts.find((s: { outcome: string }) => s.outcome === 'aborted');
    expect(aborted.unlitChambers).toEqual([8]);
    expect(aborted.findingKinds.sort()).toEqual(['chamber_unlit', 'start_failed']);
    expect(body.starts.every((s: { spreadEndOfWarmupC: number | null }) => s.spreadEndOfWarmupC !== null)).toBe(true);
  });

  it('carries the start counters in the unit status and in its fleet row', async () => {
    const [c] = await createStartsRepository(t.db.pool).counters([unit.config.id]);
    expect(c.firedStarts).toBe(truth.starts.length);
    const status = (await t.app.inject({ url: `/v1/units/${unit.config.id}/status`, headers: bearer(t.keys.viewer) })).json();
    expect(status.starts).toEqual({ firedStarts: c.firedStarts, failedStarts: c.failedStarts, trips: c.trips, firedHours: c.firedHours, lastStartAt: c.lastStartAt, lastStartOutcome: c.lastStartOutcome });
    const fleet = (await t.app.inject({ url: '/v1/fleet', headers: bearer(t.keys.viewer) })).json();
    const row = fleet.units.find((u: { unitId: string }) => u.unitId === unit.config.id);
    expect(row.starts).toEqual(status.starts);
    expect(row.starts.failedStarts).toBeGreaterThanOrEqual(1);
  });

  it('serves one start with its phase timeline, crossfire time, lighting and findings; 404 for an unknown one', async () => {
    const list = (await t.app.inject({ url: `/v1/units/${unit.config.id}/starts?from=${new Date(scenario.from).toISOString()}&to=${new Date(scenario.to).toISOString()}`, headers: bearer(t.keys.viewer) })).json();
    const late = list.starts.find((s: { findingKinds: string[]; outcome: string }) => s.outcome !== 'aborted' && s.findingKinds.includes('chamber_unlit'));
    const res = await t.app.inject({ url: `/v1/units/${unit.config.id}/starts/${late.startId}`, headers: bearer(t.keys.viewer) });
    expect(res.statusCode).toBe(200);
    const d = res.json();
    expect(d.phases.map((p: { phase: string }) => p.phase)).toEqual(['cranking', 'firing', 'flame_established', 'warm_up', 'acceleration', 'starter_disengaged', 'full_speed_no_load', 'synchronised', 'loading']);
    expect(d.crossfireCompleteS).toBeGreaterThan(30);
    expect(d.lighting.chambers.length).toBe(unit.config.chambers.count);
    expect(d.lighting.lateChambers[0].chamber).toBe(5);
    expect(d.findings[0].kind).toBe('chamber_unlit');
    expect(d.findings[0].chamber).toBe(5);
    expect(d.caution).toContain('advises');
    expect(d.trace).toBeUndefined();
    const missing = await t.app.inject({ url: `/v1/units/${unit.config.id}/starts/start-20200101T000000Z`, headers: bearer(t.keys.viewer) });
    expect(missing.statusCode).toBe(404);
    expect(missing.json().error).toBe('not_found');
  });

  it('draws a start: phases shaded, speed, fuel, spread, a line per chamber, the unlit chamber marked', async () => {
    const list = (await t.app.inject({ url: `/v1/units/${unit.config.id}/starts?from=${new Date(scenario.from).toISOString()}&to=${new Date(scenario.to).toISOString()}`, headers: bearer(t.keys.viewer) })).json();
    const aborted = list.starts.find((s: { outcome: string }) => s.outcome === 'aborted');
    const res = await t.app.inject({ url: `/v1/units/${unit.config.id}/starts/${aborted.startId}/start.svg`, headers: bearer(t.keys.viewer) });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toContain('image/svg+xml');
    const doc = parser.parse(res.body);
    expect(doc.svg).toBeDefined();
    const body = res.body;
    const phases = [...body.matchAll(/class="phase" data-phase="([a-z_]+)"/g)].map((m) => m[1]);
    expect(phases).toEqual(['cranking', 'firing', 'flame_established', 'warm_up', 'acceleration']);
    expect(body).toContain('class="speed"');
    expect(body).toContain('class="fuel"');
    expect(body).toContain('class="spread"');
    expect([...body.matchAll(/class="chamber(?: unlit)?" data-chamber="(\d+)"/g)].length).toBe(unit.config.chambers.count);
    expect(body).toMatch(/class="chamber unlit" data-chamber="8"/);
  });
});
