/**
 * validateRing on its own: every rejection reason, the normalised ring it returns, and the
 * conversions from °F and from Type K millivolts to °C.
 */
import { describe, expect, it } from 'vitest';
import { loadConfig } from '../../services/db/config.ts';
import type { RingRow } from '../../services/db/rings.ts';
import { isRejection, parseRfc3339, thermocoupleCounter, validateRing, type Rejection, type ValidationContext } from '../../services/ingest/validate.ts';
import { typeKMeasuredMv } from '../../services/core/temperature.ts';

const NOW = Date.UTC(2026, 2, 1, 12, 0, 0);
const bounds = loadConfig({}).ingest.bounds;
const ctx = (count: number | ((t: number) => number | undefined) = 4, futureToleranceS = 300): ValidationContext => ({
  nowMs: NOW,
  futureToleranceS,
  bounds,
  thermocoupleCount: typeof count === 'number' ? () => count : count,
});
const good = (extra: Record<string, unknown> = {}) => ({
  ts: '2026-03-01T10:00:00Z', loadMw: 21.4, ambientC: 12.5, ambientKPa: 100.9, speedPct: 100,
  exhaustC: [551.2, 549.8, null, 560], ...extra,
});

function rejected(raw: unknown, c = ctx()): Rejection {
  const v = validateRing(raw, 'ridge-2', c);
  if (!isRejection(v)) throw new Error(`expected a rejection, got a ring`);
  return v;
}
function accepted(raw: unknown, c = ctx()): RingRow {
  const v = validateRing(raw, 'ridge-2', c);
  if (isRejection(v)) throw new Error(`expected a ring, got ${v.field}: ${v.reason}`);
  return v;
}

describe('a valid ring', () => {
  it('is normalised: time in ms, readings as Float64Array with NaN for a missing one, optional fields null', () => {
    const r = accepted(good());
    expect(r.unitId).toBe('ridge-2');
    expect(r.tsMs).toBe(Date.UTC(2026, 2, 1, 10));
    expect(r.exhaustC).toBeInstanceOf(Float64Array);
    expect(Array.from(r.exhaustC)).toEqual([551.2, 549.8, NaN, 560]);
    expect([r.cdtC, r.cdpKPa, r.fuelFlowKgS, r.flameDetected]).toEqual([null, null, null, null]);
  });

  it('keeps the optional operating-point fields', () => {
    const r = accepted(good({ cdtC: 390, cdpKPa: 1500, fuelFlowKgS: 1.6, flameDetected: true, unitId: 'ridge-2' }));
    expect([r.cdtC, r.cdpKPa, r.fuelFlowKgS, r.flameDetected]).toEqual([390, 1500, 1.6, true]);
  });

  it('stores an implausible but possible reading as sent (judging it is the analysis\' job)', () => {
    expect(accepted(good({ exhaustC: [-40, 1300, 551, 552] })).exhaustC[1]).toBe(1300);
  });

  it('accepts a time with an offset and a fraction, and a ring within the future tolerance', () => {
    expect(accepted(good({ ts: '2026-03-01T11:00:00.250+01:00' })).tsMs).toBe(Date.UTC(2026, 2, 1, 10, 0, 0, 250));
    expect(accepted(good({ ts: '2026-03-01T12:04:59Z' })).tsMs).toBe(NOW + 299_000);
  });
});

describe('every rejection reason names its field', () => {
  const cases: [string, unknown, string, RegExp][] = [
    ['not an object', [1, 2], 'ring', /not an object/],
    ['unknown field', good({ exhaustK: [1] }), 'exhaustK', /not a ring field/],
    ['another unit named in the ring', good({ unitId: 'other-1' }), 'unitId', /other-1.*ridge-2/],
    ['time missing', good({ ts: undefined }), 'ts', /required/],
    ['time not text', good({ ts: 1772359200000 }), 'ts', /not a time/],
    ['unparseable time', good({ ts: 'yesterday at ten' }), 'ts', /RFC 3339/],
    ['time without offset', good({ ts: '2026-03-01T10:00:00' }), 'ts', /RFC 3339/],
    ['30 February', good({ ts: '2026-02-30T10:00:00Z' }), 'ts', /day 30.*28 days/],
    ['hour 24', good({ ts: '2026-03-01T24:00:00Z' }), 'ts', /hour 24/],
    ['month 13', good({ ts: '2026-13-01T10:00:00Z' }), 'ts', /month 13/],
    ['before 1970', good({ ts: '1969-12-31T23:59:59Z' }), 'ts', /before 1970/],
    ['too far in the future', good({ ts: '2026-03-01T12:05:01Z' }), 'ts', /301 s in the future; at most 300 s/],
    ['required number missing', good({ loadMw: undefined }), 'loadMw', /required/],
    ['text where a number belongs', good({ ambientC: '12.5' }), 'ambientC', /not a number \(got text "12.5"\)/],
    ['boolean where a number belongs', good({ speedPct: true }), 'speedPct', /not a number/],
    ['load out of bounds', good({ loadMw: 5000 }), 'loadMw', /5000 MW is outside the physical bounds -100…2000 MW/],
    ['ambient temperature out of bounds', good({ ambientC: -90 }), 'ambientC', /°C is outside/],
    ['ambient pressure out of bounds', good({ ambientKPa: 10 }), 'ambientKPa', /kPa is outside/],
    ['speed out of bounds', good({ speedPct: 180 }), 'speedPct', /% is outside/],
    ['optional number not a number', good({ cdtC: 'hot' }), 'cdtC', /not a number/],
    ['optional number out of bounds', good({ fuelFlowKgS: -1 }), 'fuelFlowKgS', /kg\/s is outside/],
    ['flame flag not a boolean', good({ flameDetected: 'yes' }), 'flameDetected', /true or false/],
    ['no exhaust readings', good({ exhaustC: undefined }), 'exhaustC', /required/],
    ['two kinds of exhaust readings', good({ exhaustF: [1000, 1000, 1000, 1000] }), 'exhaustC', /only one of/],
    ['exhaust readings not a list', good({ exhaustC: 551 }), 'exhaustC', /not a list/],
    ['wrong thermocouple count', good({ exhaustC: [551, 552, 553] }), 'exhaustC', /has 3 readings, but unit ridge-2 has 4 thermocouples/],
    ['a reading that is text', good({ exhaustC: [551, 'x', 553, 554] }), 'exhaustC.1', /thermocouple 2: is not a number/],
    ['a reading below absolute zero', good({ exhaustC: [551, 552, -300, 554] }), 'exhaustC.2', /thermocouple 3: -300 °C is outside the physical bounds/],
    ['a °F reading out of bounds', good({ exhaustC: undefined, exhaustF: [1000, 1000, 1000, 9000] }), 'exhaustF.3', /9000 °F \(4982.2 °C\)/],
    ['millivolts without a cold junction', good({ exhaustC: undefined, exhaustMv: [20, 20, 20, 20] }), 'coldJunctionC', /required with exhaustMv/],
    ['cold junction without millivolts', good({ coldJunctionC: 25 }), 'coldJunctionC', /only with exhaustMv/],
    ['millivolts outside the Type K range', good({ exhaustC: undefined, exhaustMv: [20, 70, 20, 20], coldJunctionC: 25 }), 'exhaustMv.1', /70 mV is outside the Type K reference range/],
    ['cold junction out of bounds', good({ exhaustC: undefined, exhaustMv: [20, 20, 20, 20], coldJunctionC: 400 }), 'coldJunctionC', /outside/],
  ];
  it.each(cases)('%s', (_name, raw, field, reason) => {
    const r = rejected(raw);
    expect(r.field).toBe(field);
    expect(r.reason).toMatch(reason);
  });

  it('a time when the unit has no configuration in force', () => {
    const r = rejected(good(), ctx(() => undefined));
    expect(r).toEqual({ field: 'ts', reason: expect.stringMatching(/no configuration in force/) });
  });

  it('bounds come from the configuration (CANSIGHT_BOUNDS_*)', () => {
    const narrow = loadConfig({ CANSIGHT_BOUNDS_LOAD_MW: '0,30' }).ingest.bounds;
    const r = validateRing(good({ loadMw: 31 }), 'ridge-2', { ...ctx(), bounds: narrow });
    expect(r).toEqual({ field: 'loadMw', reason: expect.stringMatching(/0…30 MW/) });
    expect(() => loadConfig({ CANSIGHT_BOUNDS_LOAD_MW: '30,0' })).toThrow(/CANSIGHT_BOUNDS_LOAD_MW/);
    expect(() => loadConfig({ CANSIGHT_BOUNDS_AMBIENT_C: 'cold' })).toThrow(/CANSIGHT_BOUNDS_AMBIENT_C.*MIN,MAX/);
  });
});

describe('thermocouple count follows the configuration in force at the ring time', () => {
  it('uses the version with the latest effective time not after the ring', () => {
    const count = thermocoupleCounter([
      { effectiveFrom: null, config: { thermocouples: { count: 4 } } },
      { effectiveFrom: '2026-03-01T11:00:00Z', config: { thermocouples: { count: 5 } } },
    ]);
    expect(isRejection(validateRing(good(), 'ridge-2', ctx(count)))).toBe(false);
    const later = rejected(good({ ts: '2026-03-01T11:30:00Z' }), ctx(count));
    expect(later.reason).toMatch(/has 4 readings, but unit ridge-2 has 5 thermocouples/);
  });
});

describe('conversion to °C', () => {
  it('°F by (F − 32)·5/9: 1022 °F is 550 °C, 32 °F is 0 °C, null stays missing', () => {
    const r = accepted(good({ exhaustC: undefined, exhaustF: [1022, 32, null, 1000] }));
    expect(r.exhaustC[0]).toBeCloseTo(550, 10);
    expect(r.exhaustC[1]).toBeCloseTo(0, 10);
    expect(r.exhaustC[2]).toBeNaN();
    expect(r.exhaustC[3]).toBeCloseTo(537.7778, 4);
  });

  // Reference values: NIST ITS-90 Thermocouple Database, Type K, reference junction at 0 °C
  // (NIST Monograph 175): E(500 °C) = 20.644 mV, E(800 °C) = 33.275 mV, E(1000 °C) = 41.276 mV.
  // Tolerance 0.1 °C: the NIST inverse polynomials are stated to within about −0.05…+0.06 °C,
  // and the table's 0.001 mV rounding is worth about 0.025 °C at these temperatures.
  it('Type K millivolts with the cold junction at 0 °C give the NIST table temperatures', () => {
    const r = accepted(good({ exhaustC: undefined, exhaustMv: [20.644, 33.275, 41.276, null], coldJunctionC: 0 }));
    expect(Math.abs(r.exhaustC[0] - 500)).toBeLessThanOrEqual(0.1);
    expect(Math.abs(r.exhaustC[1] - 800)).toBeLessThanOrEqual(0.1);
    expect(Math.abs(r.exhaustC[2] - 1000)).toBeLessThanOrEqual(0.1);
    expect(r.exhaustC[3]).toBeNaN();
  });

  it('with the cold junction at 25 °C the measured EMF is E(t) − E(25 °C), and t comes back', () => {
    // E(25 °C) = 1.000 mV (NIST table), so a hot junction at 500 °C reads 19.644 mV.
    expect(typeKMeasuredMv(500, 25)).toBeCloseTo(19.644, 2);
    const r = accepted(good({ exhaustC: undefined, exhaustMv: [19.644, 32.275, 40.276, 0], coldJunctionC: 25 }));
    expect(r.exhaustC[0]).toBeCloseTo(500, 0);
    expect(r.exhaustC[1]).toBeCloseTo(800, 0);
    expect(r.exhaustC[2]).toBeCloseTo(1000, 0);
    expect(r.exhaustC[3]).toBeCloseTo(25, 0);
  });
});

describe('RFC 3339 times', () => {
  it('parses Z, offsets, a space for T and fractions, dropping below the millisecond', () => {
    expect(parseRfc3339('2026-03-01T10:00:00Z')).toBe(Date.UTC(2026, 2, 1, 10));
    expect(parseRfc3339('2026-03-01 10:00:00-05:30')).toBe(Date.UTC(2026, 2, 1, 15, 30));
    expect(parseRfc3339('2026-03-01T10:00:00.123456Z')).toBe(Date.UTC(2026, 2, 1, 10, 0, 0, 123));
    expect(parseRfc3339('2024-02-29T00:00:00Z')).toBe(Date.UTC(2024, 1, 29));
  });
  it('refuses what is not a calendar instant', () => {
    expect(parseRfc3339('2025-02-29T00:00:00Z')).toMatch(/day 29/);
    expect(parseRfc3339('2026-03-01T10:00:60Z')).toMatch(/second 60/);
    expect(parseRfc3339('2026-03-01')).toMatch(/RFC 3339/);
  });
});
