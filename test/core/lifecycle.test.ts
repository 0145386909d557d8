import { describe, expect, it } from 'vitest';
import {
  aggregateByPeriod,
  analyseRing,
  baselineAt,
  baselineSampleFromAnalysis,
  calibrateSwirl,
  createCusum,
  defaultThresholds,
  driftRate,
  evaluateFindings,
  fitBinnedBaseline,
  fitUnitBaseline,
  parseBaseline,
  prepareUnit,
  removeCommonMode,
  ringFromChambers,
  serialiseBaseline,
  spreadLimitDegC,
  SECONDS_PER_DAY,
  type BaselineSample,
} from '../../services/core/index.ts';
import { demoConfig, mulberry32 } from './helpers.ts';

describe('binned baseline', () => {
  const rand = mulberry32(3);
  const loads: number[] = [];
  const vals: number[] = [];
  for (let i = 0; i < 4000; i++) {
    const l = 0.4 + 0.6 * rand();
    loads.push(l);
    vals.push(400 + 150 * l + (rand() - 0.5) * 4);
  }
  loads.push(0.12);
  vals.push(999);
  const b = fitBinnedBaseline(loads, vals);
  it('recovers the value at a load by interpolating bin medians', () => {
    const v = baselineAt(b, 0.73);
    expect(v).not.toBeNull();
    expect(v!.median).toBeCloseTo(400 + 150 * 0.73, 0);
    expect(v!.scale).toBeGreaterThan(0.5);
    // within a 5 % bin the value itself moves by 7.5 °C, so the robust scale is wider than the ±2 °C noise
    expect(v!.scale).toBeLessThan(4);
  });
  it('places each bin at its rings\' median load, so a unit at base load (one edge of its bin) reads its own normal', () => {
    // A value rising 150 °C per unit of load (worked by hand, no noise): part load spread over
    // the 90–95 % bin, base load held at 95–97 % (the lower part of the 95–100 % bin, whose
    // centre is 97.5 %). At 96 % the normal is 400 + 150·0.96 = 544 °C. Interpolating from the
    // bin centres gives 544 + (0.975 − 0.96)/0.05 · (538.75 − 544) = 542.4 °C (the part-load
    // bin's median, 538.75, belongs to 92.5 %): 1.6 °C of bias on every base-load ring.
    const l: number[] = [];
    const v: number[] = [];
    for (let i = 0; i < 400; i++) {
      const part = 0.9 + (0.05 * (i + 0.5)) / 400;
      const base = 0.95 + (0.02 * (i + 0.5)) / 400;
      l.push(part, base);
      v.push(400 + 150 * part, 400 + 150 * base);
    }
    const edge = fitBinnedBaseline(l, v);
    for (const at of [0.93, 0.945, 0.955, 0.96]) expect(baselineAt(edge, at)!.median).toBeCloseTo(400 + 150 * at, 1);
    expect(edge.bins[19].loadMedian).toBeCloseTo(0.96, 6);
    // A baseline stored before bins kept their median load is read at the bin centres, as it was fitted.
    const old = { ...edge, bins: edge.bins.map(({ loadMedian: _omit, ...rest }) => rest) };
    expect(baselineAt(old, 0.96)!.median).toBeCloseTo(544 + 0.3 * (538.75 - 544), 6);
  });
  it('says "no baseline" in a thin bin and outside the bins instead of extrapolating', () => {
    expect(b.bins[2].count).toBe(1);
    expect(baselineAt(b, 0.12)).toBeNull();
    expect(baselineAt(b, 0.2)).toBeNull();
    expect(baselineAt(b, 1.5)).toBeNull();
    expect(baselineAt(b, Number.NaN)).toBeNull();
  });
  it('is versioned and survives a JSON round trip', () => {
    const config = demoConfig();
    const ctx = prepareUnit(config);
    const samples: BaselineSample[] = [];
    for (let i = 0; i < 400; i++) {
      const l = 0.75 + 0.1 * rand();
      samples.push(baselineSampleFromAnalysis(analyseRing(ctx, ringFromChambers(config, new Array(10).fill(0), l, 520 + (rand() - 0.5) * 6, ctx.kernel), l)));
    }
    const ub = fitUnitBaseline(samples, { version: 3, window: { from: '2026-01-01T00:00:00Z', to: '2026-01-15T00:00:00Z' }, fittedAt: '2026-01-16T08:00:00Z', fittedBy: 'engineer@example.org' });
    const back = parseBaseline(serialiseBaseline(ub));
    expect(back).toEqual(ub);
    expect(back.thermocouples).toHaveLength(18);
    expect(back.chambers).toHaveLength(10);
    expect(back.version).toBe(3);
    expect(() => parseBaseline('{"format":99}')).toThrow(/format/);
  });
});

describe('drift', () => {
  it('aggregates per day and finds a known drift rate inside its interval', () => {
    const rand = mulberry32(9);
    const t: number[] = [];
    const v: number[] = [];
    for (let h = 0; h < 24 * 60; h++) {
      t.push(h * 3600);
      v.push(-0.2 * (h / 24) + (rand() - 0.5) * 6);
    }
    const agg = aggregateByPeriod(t, v, SECONDS_PER_DAY);
    expect(agg).toHaveLength(60);
    expect(agg[0].count).toBe(24);
    const fired = agg.map((_, i) => i * 24);
    const d = driftRate(
      agg.map((a) => a.periodStartS),
      agg.map((a) => a.median),
      fired,
    );
    // true rate −0.2 °C/day = −6 °C per 30 days
    expect(Math.abs(d.per30DaysDegC + 6)).toBeLessThan(0.5);
    expect(d.per30DaysInterval[0]).toBeLessThan(d.per30DaysDegC);
    expect(d.per30DaysInterval[1]).toBeGreaterThan(d.per30DaysDegC);
    expect(d.per30DaysInterval[1] - d.per30DaysInterval[0]).toBeLessThan(1);
    expect(d.significant).toBe(true);
    expect(d.per1000FiredHoursDegC).toBeCloseTo((-0.2 / 24) * 1000, -1);
  });
  it('removes the common mode before blaming a chamber', () => {
    const r = removeCommonMode([3, 4, 5, -20, Number.NaN]);
    expect(r.commonModeDegC).toBe(3.5);
    expect(Array.from(r.residualsDegC.slice(0, 4))).toEqual([-0.5, 0.5, 1.5, -23.5]);
    expect(r.residualsDegC[4]).toBeNaN();
  });
});

describe('findings', () => {
  const config = demoConfig();
  const ctx = prepareUnit(config);
  it('a deep cold plume is a critical chamber_cold with runner-up, evidence and advice', () => {
    // No baseline here, so the critical level is chamberColdCriticalDegC × noBaselineChamberFactor (200 °C).
    const dev = new Array(10).fill(0);
    dev[3] = -230;
    const a = analyseRing(ctx, ringFromChambers(config, dev, 0.8, 550, ctx.kernel), 0.8);
    const f = evaluateFindings({ analysis: a, steady: true });
    const c = f.find((x) => x.kind === 'chamber_cold');
    expect(c).toBeDefined();
    expect(c!.chamber).toBe(4);
    expect(c!.grade).toBe('critical');
    expect([3, 5]).toContain(c!.runnerUpChamber);
    expect(c!.advice).toContain('chamber 4');
    expect(c!.evidence.residualDegC as number).toBeLessThan(-200);
    expect(f.filter((x) => x.kind === 'chamber_cold')).toHaveLength(1);
    // The high spread the plume makes is the chamber's evidence, not an alert of its own.
    expect(f.some((x) => x.kind === 'spread_high')).toBe(false);
    expect(c!.evidence.spreadDegC as number).toBeGreaterThan(c!.evidence.spreadLimitDegC as number);
    expect(c!.message).toContain('exhaust spread');
  });
  it('messages of a °F unit give temperature differences in °F; the evidence stays in °C', () => {
    const dev = new Array(10).fill(0);
    dev[3] = -230;
    const a = analyseRing(ctx, ringFromChambers(config, dev, 0.8, 550, ctx.kernel), 0.8);
    const c = evaluateFindings({ analysis: a, steady: true });
    const f = evaluateFindings({ analysis: a, steady: true, temperatureUnit: 'F' });
    const inC = c.find((x) => x.kind === 'chamber_cold')!;
    const inF = f.find((x) => x.kind === 'chamber_cold')!;
    expect(inF.evidence).toEqual(inC.evidence);
    const degC = Number(/runs ([\d.]+) °C colder/.exec(inC.message)![1]);
    const degF = Number(/runs ([\d.]+) °F colder/.exec(inF.message)![1]);
    // A difference converts by the factor 9/5 alone (ITS-90 scale relation, no offset for differences).
    expect(degF).toBeCloseTo(degC * 1.8, 0);
    expect(inF.message).not.toContain('°C');
  });
  describe('a ring near the limits, on both sides (no baseline: the spread limit is 45 °C, a chamber must stand 50 °C from the others)', () => {
    /** Chambers within ±3 °C of each other, chamber 4 off by `chamber4DegC`. */
    const ring = (chamber4DegC: number) => {
      const rand = mulberry32(4);
      const dev = Array.from({ length: 10 }, () => (rand() - 0.5) * 6);
      dev[3] = chamber4DegC;
      return ringFromChambers(config, dev, 0.8, 550, ctx.kernel);
    };
    // The spread worked out here from the readings themselves: hottest less coldest.
    const spreadByHand = (r: ArrayLike<number>) => Math.max(...Array.from(r)) - Math.min(...Array.from(r));
    const findings = (r: ArrayLike<number>) => {
      const a = analyseRing(ctx, r, 0.8);
      return evaluateFindings({ analysis: a, steady: true, history: { previousSteadySpreadDegC: a.spread.spreadDegC } });
    };

    it('a cold chamber 40 °C down: spread 40–45 °C, inside both limits, no findings', () => {
      expect(defaultThresholds.spreadDefaultLimitDegC).toBe(45);
      expect(defaultThresholds.chamberNoBaselineWarningDegC).toBe(50);
      const r = ring(-40);
      expect(spreadByHand(r)).toBeGreaterThan(40);
      expect(spreadByHand(r)).toBeLessThan(45);
      expect(findings(r)).toEqual([]);
    });

    it('a hot chamber 40 °C up: the same, no findings', () => {
      const r = ring(40);
      expect(spreadByHand(r)).toBeGreaterThan(40);
      expect(spreadByHand(r)).toBeLessThan(45);
      expect(findings(r)).toEqual([]);
    });

    it('4 °C deeper: the spread passes 45 °C and that alone is a spread_high warning', () => {
      const r = ring(-44);
      expect(spreadByHand(r)).toBeGreaterThan(45);
      expect(spreadByHand(r)).toBeLessThan(48);
      expect(findings(r).map((f) => `${f.kind} ${f.grade}`)).toEqual(['spread_high warning']);
    });

    it('62 °C down, past the chamber level even after the solver’s shrinkage: a chamber_cold on chamber 4', () => {
      const f = findings(ring(-62));
      expect(f.filter((x) => x.kind === 'chamber_cold').map((x) => x.chamber)).toEqual([4]);
      expect(f.some((x) => x.kind === 'chamber_hot')).toBe(false);
    });
  });
  it('spread high with the two coldest apart and spreadExcl1 normal names the coldest thermocouple', () => {
    const r = Array.from({ length: 18 }, () => 550);
    r[4] = 512; // 38 °C low: below the isolated-outlier level, above the limit set here
    r[4 + 1] = 549;
    r[12] = 540;
    const a = analyseRing(ctx, r, 0.8);
    const f = evaluateFindings({ analysis: a, steady: true, thresholds: { spreadDefaultLimitDegC: 30 } });
    const s = f.find((x) => x.kind === 'spread_high');
    expect(s?.thermocouple).toBe(5);
    expect(s?.advice).toBe('check thermocouple 5 and its wiring at the next opportunity');
  });
  it('a spread jump between steady rings is a finding; the learnt limit follows the baseline', () => {
    const a = analyseRing(ctx, Array.from({ length: 18 }, () => 550), 0.8);
    const f = evaluateFindings({ analysis: a, steady: true, history: { previousSteadySpreadDegC: 30 } });
    expect(f.find((x) => x.kind === 'spread_jump')?.evidence.jumpDegC).toBe(-30);
    expect(evaluateFindings({ analysis: a, steady: false, history: { previousSteadySpreadDegC: 30 } }).some((x) => x.kind === 'spread_jump')).toBe(false);
    expect(spreadLimitDegC(null, 0.8).limitDegC).toBe(defaultThresholds.spreadDefaultLimitDegC);
  });
  it('a significant cooling rate gives chamber_drift with fuel-nozzle advice; a CUSUM signal alone raises nothing', () => {
    const a = analyseRing(ctx, Array.from({ length: 18 }, () => 550), 0.8);
    const cusum = { ...createCusum(0.5, 5), lower: 6.2, count: 30 };
    expect(evaluateFindings({ analysis: a, steady: true, drift: { chambers: [null, null, { cusum }] } }).some((x) => x.kind === 'chamber_drift')).toBe(false);
    const rate = { per30DaysDegC: -9, per30DaysInterval: [-12, -6] as [number, number], per1000FiredHoursDegC: null, per1000FiredHoursInterval: null, confidence: 0.95, n: 12, significant: true };
    const f = evaluateFindings({ analysis: a, steady: true, drift: { chambers: [null, null, { cusum, rate }] } });
    const d = f.find((x) => x.kind === 'chamber_drift');
    expect(d?.chamber).toBe(3);
    expect(d?.grade).toBe('warning');
    expect(d?.evidence.cusumSignal).toBe('down');
    expect(d?.advice).toBe('inspect chamber 3 fuel nozzle at the next outage');
  });
});

describe('swirl calibration', () => {
  it('recovers a known swirl curve from rings with chamber 4 cold, with small residuals', () => {
    const truth = demoConfig();
    const ctx = prepareUnit(truth);
    const rand = mulberry32(17);
    const samples = [];
    for (let i = 0; i < 60; i++) {
      const l = 0.3 + (0.7 * i) / 59;
      const dev = new Array(10).fill(0);
      dev[3] = -80;
      const ring = ringFromChambers(truth, dev, l, 540, ctx.kernel).map((x) => x + (rand() - 0.5) * 2);
      samples.push({ loadFraction: l, readingsDegC: ring });
    }
    const c = calibrateSwirl({ ...truth, swirl: { sense: 1, curve: [[0.5, 0]] } }, 4, samples, { knots: [0.3, 0.6, 1.0] });
    expect(c.points).toHaveLength(60);
    expect(c.curve.map((p) => p[0])).toEqual([0.3, 0.6, 1.0]);
    expect(Math.abs(c.curve[0][1] - 92)).toBeLessThan(3);
    expect(Math.abs(c.curve[1][1] - 74)).toBeLessThan(3);
    expect(Math.abs(c.curve[2][1] - 55)).toBeLessThan(3);
    expect(c.rmsResidualDeg).toBeLessThan(3);
    const poly = calibrateSwirl(truth, 4, samples, { method: 'polynomial', degree: 1 });
    expect(poly.curve[0][1]).toBeGreaterThan(poly.curve[poly.curve.length - 1][1]);
  });
});
