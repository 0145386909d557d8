/**
 * What is not judged yet is said, with why and when, instead of nulls and dashes: the core
 * sentences against dates worked by hand (first steady ring 2026-03-01T06:00Z plus the default
 * 14 days of steady data = 2026-03-15T06:00Z), and the status, chamber, thermocouple and review
 * replies of a unit with no baseline, one waiting for a requested fit, one with no rings, and
 * one fully judged.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { judgement, type JudgementInput } from '../../services/core/judgement.ts';
import { insertBaselineRequest } from '../../services/db/baselines.ts';
import { insertAnalyses, type SyntheticAnalysis } from '../../services/db/synthetic.ts';
import { bearer, createTestApp, unitBody, type TestApp } from '../helpers/app.ts';
import { CONFIG, MIN_MS, seedUnit } from './read-fixtures.ts';

const T0 = Date.parse('2026-03-01T06:00:00Z');
const base: JudgementInput = {
  unitId: 'u-1',
  ringsStored: 100,
  ringsAnalysed: 100,
  watermarkMs: Date.parse('2026-03-04T00:00:00Z'),
  latest: { steady: true, limitFromBaseline: false, baselineVersion: null, loadFraction: 0.8 },
  baselineVersion: null,
  firstSteadyMs: T0,
  baselineAutoDays: 14,
  pendingRequest: null,
};

describe('the sentences', () => {
  it('no baseline: when the automatic fit falls due in ring time, how far analysis is, and how to fit one sooner', () => {
    const j = judgement(base);
    expect(j.baselineDueMs).toBe(Date.parse('2026-03-15T06:00:00Z'));
    expect(j.notJudged).toHaveLength(1);
    expect(j.notJudged[0].part).toBe('baseline');
    expect(j.notJudged[0].reason).toContain('when analysis reaches 2026-03-15T06:00:00Z in ring time, 14 days after the first steady ring (2026-03-01T06:00:00Z); analysis has reached 2026-03-04T00:00:00Z');
    expect(j.notJudged[0].reason).toContain('POST /v1/units/u-1/baselines');
  });

  it('a requested fit waiting for analysis names its window; with no steady ring it says so', () => {
    const waiting = judgement({ ...base, pendingRequest: { fromMs: T0, toMs: Date.parse('2026-03-08T00:00:00Z') } });
    expect(waiting.baselineDueMs).toBeNull();
    expect(waiting.notJudged[0].reason).toMatch(/the fit asked for over 2026-03-01T06:00:00Z to 2026-03-08T00:00:00Z is made once analysis passes 2026-03-08T00:00:00Z/);
    const never = judgement({ ...base, firstSteadyMs: null });
    expect(never.notJudged[0].reason).toMatch(/no steady ring analysed/);
  });

  it('no rings, rings waiting for the worker, a ring not steady, a default limit at a thin load, drift not yet computed', () => {
    expect(judgement({ ...base, ringsStored: 0, ringsAnalysed: 0, latest: null, firstSteadyMs: null, watermarkMs: null }).notJudged.map((x) => x.part)).toEqual(['analysis', 'baseline']);
    expect(judgement({ ...base, ringsAnalysed: 0, latest: null }).notJudged[0].reason).toMatch(/100 stored rings wait for the analysis worker/);
    const judged = { ...base, baselineVersion: 2, latest: { steady: true, limitFromBaseline: true, baselineVersion: 2, loadFraction: 0.8 } };
    expect(judgement(judged).notJudged).toEqual([]);
    expect(judgement({ ...judged, latest: { ...judged.latest, steady: false } }).notJudged.map((x) => x.part)).toEqual(['residuals']);
    const thin = judgement({ ...judged, latest: { ...judged.latest, limitFromBaseline: false, loadFraction: 0.42 } });
    expect(thin.notJudged[0]).toMatchObject({ part: 'limit', reason: expect.stringContaining('(42 % corrected load)') });
    expect(judgement({ ...judged, driftStates: 0, driftSchedule: '17 2 * * *' }).notJudged[0]).toMatchObject({ part: 'drift', reason: expect.stringMatching(/as each ring-time day after the baseline ends.*nightly job at 17 2 \* \* \* UTC/) });
  });
});

describe('the replies', () => {
  let t: TestApp;
  const now = Date.now();
  const first = Math.floor(now / MIN_MS) * MIN_MS - 120 * MIN_MS;
  const steadyRings = (n: number): SyntheticAnalysis[] =>
    Array.from({ length: n }, (_, i) => ({
      tsMs: first + i * MIN_MS,
      loadFraction: 0.9,
      spreadC: 30,
      spreadLimitC: 45,
      validity: Array(18).fill(0),
      tcDeviationC: Array(18).fill(0.5),
      chamberDeviationC: Array(10).fill(0.2),
      swirlDeg: 60,
      baselineVersion: null,
    }));

  beforeAll(async () => {
    t = await createTestApp();
    for (const id of ['nj-new', 'nj-asked', 'nj-empty', 'nj-judged']) {
      const res = await t.send({ method: 'POST', url: '/v1/units', headers: bearer(t.keys.admin), payload: { ...unitBody(id), ...CONFIG } });
      expect(res.statusCode).toBe(201);
    }
    await insertAnalyses(t.db.pool, 'nj-new', steadyRings(60));
    await insertAnalyses(t.db.pool, 'nj-asked', steadyRings(60));
    await insertBaselineRequest(t.db.pool, 'nj-asked', first, first + 3 * 86_400_000, 'shift engineer 1');
    await seedUnit(t.db.pool, 'nj-judged', now);
  });
  afterAll(async () => t?.close());

  const get = async (url: string) => {
    const res = await t.send({ url, headers: bearer(t.keys.viewer) });
    expect(res.statusCode, res.body).toBe(200);
    return res;
  };
  const due = new Date(first + 14 * 86_400_000).toISOString();

  it('status, chambers and thermocouples of a unit without a baseline say when the first falls due and how to ask for one', async () => {
    for (const what of ['status', 'chambers', 'thermocouples']) {
      const body = (await get(`/v1/units/nj-new/${what}`)).json();
      expect(body.baselineDueTs, what).toBe(due);
      expect(body.notJudged[0], what).toMatchObject({ part: 'baseline', reason: expect.stringContaining(`when analysis reaches ${due.replace('.000Z', 'Z')} in ring time`) });
      expect(body.notJudged[0].reason).toContain('POST /v1/units/nj-new/baselines');
    }
  });

  it('a unit waiting for a requested fit names the request; a unit with no rings says to send some', async () => {
    const asked = (await get('/v1/units/nj-asked/status')).json();
    expect(asked.baselineDueTs).toBeNull();
    expect(asked.notJudged[0].reason).toContain(`the fit asked for over ${new Date(first).toISOString().replace('.000Z', 'Z')}`);
    const empty = (await get('/v1/units/nj-empty/status')).json();
    expect(empty.notJudged.map((x: { part: string }) => x.part)).toEqual(['analysis', 'baseline']);
    expect(empty.notJudged[0].reason).toContain('POST /v1/units/nj-empty/rings');
  });

  it('a unit with a baseline and drift is fully judged: nothing listed', async () => {
    for (const what of ['status', 'chambers', 'thermocouples']) expect((await get(`/v1/units/nj-judged/${what}`)).json().notJudged, what).toEqual([]);
  });

  it('the review says it before its tables, marks the empty cells "not judged", and the CSV carries it', async () => {
    const html = (await get('/v1/units/nj-new/review')).body;
    expect(html).toContain('<h2>Not judged yet</h2>');
    expect(html).toContain('in ring time, 14 days after the first steady ring');
    expect(html).toContain('<span class="why">not judged</span>');
    const csv = (await get('/v1/units/nj-new/review?format=csv')).body;
    expect(csv).toMatch(/^not_judged,baseline,.*No baseline yet/m);
    expect((await get('/v1/units/nj-judged/review')).body).not.toContain('Not judged yet');
  });
});
