/**
 * Baseline periods from maintenance events: which period is in force, and how a baseline
 * stands in it. Every expected value is worked by hand from the events given.
 */
import { describe, expect, it } from 'vitest';
import { baselinePeriodAt, baselineStanding, chambersReached } from '../../services/core/baseline-periods.ts';
import { judgement } from '../../services/core/judgement.ts';

const DAY = 86_400_000;
const events = [
  { kind: 'compressor_wash', atMs: 5 * DAY, chambers: null },
  { kind: 'nozzles_worked', atMs: 10 * DAY, chambers: [4] },
  { kind: 'nozzles_worked', atMs: 10 * DAY, chambers: [5, 4] },
  { kind: 'thermocouple_replaced', atMs: 15 * DAY, chambers: null },
  { kind: 'combustor_tuning', atMs: 20 * DAY, chambers: null },
];

describe('baseline periods', () => {
  it('a wash or a probe starts none; nozzle work on chambers 4 and 5 does; tuning makes it the whole unit', () => {
    expect(baselinePeriodAt(events, 7 * DAY)).toBeNull();
    expect(baselinePeriodAt(events, 16 * DAY)).toEqual({ fromMs: 10 * DAY, chambers: [4, 5], kinds: ['nozzles_worked'] });
    expect(baselinePeriodAt(events, 20 * DAY)).toEqual({ fromMs: 20 * DAY, chambers: null, kinds: ['combustor_tuning'] });
  });

  it('a baseline from before the work is superseded, with the fit due after the auto-fit days; one from after is current', () => {
    const p = baselinePeriodAt(events, 16 * DAY);
    // Work on day 10, 14 auto-fit days: due on day 24.
    const old = baselineStanding(p, 0, 14);
    expect(old).toMatchObject({ state: 'superseded', fitDueMs: 24 * DAY });
    expect(old.caution).toContain('chambers 4, 5 are judged on the baseline from before the work');
    expect(baselineStanding(p, 11 * DAY, 14)).toEqual({ state: 'current', fitDueMs: null, caution: null });
    expect(baselineStanding(null, 0, 14).state).toBe('current');
    expect(baselineStanding(p, null, 14).state).toBe('superseded');
  });

  it('work on a chamber reaches its two neighbours round the ring (worked by hand for a ring of 10)', () => {
    expect(chambersReached([4], 10)).toEqual([3, 4, 5]);
    expect(chambersReached([1], 10)).toEqual([1, 2, 10]);
    expect(chambersReached([10, 4], 10)).toEqual([1, 3, 4, 5, 9, 10]);
    expect(chambersReached(null, 4)).toEqual([1, 2, 3, 4]);
  });

  it('the status says so while the baseline in force predates the work, and not once one is learnt after it', () => {
    const base = { unitId: 'u', ringsStored: 10, ringsAnalysed: 10, latest: null, baselineVersion: 1, firstSteadyMs: null, pendingRequest: null, baselineAutoDays: 14, periods: events };
    const during = judgement({ ...base, watermarkMs: 16 * DAY, baselineInForceFromMs: 0 });
    expect(during.baselineCaution).toContain('due at ' + new Date(24 * DAY).toISOString());
    expect(during.notJudged.some((x) => x.part === 'baseline' && x.reason.includes('not drift'))).toBe(true);
    expect(judgement({ ...base, watermarkMs: 16 * DAY, baselineInForceFromMs: 10 * DAY }).baselineCaution).toBeNull();
    expect(judgement({ ...base, watermarkMs: 7 * DAY, baselineInForceFromMs: 0 }).baselineCaution).toBeNull();
  });
});
