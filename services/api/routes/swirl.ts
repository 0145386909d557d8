/**
 * POST /v1/units/:unitId/swirl/calibrate {from, to, chamber}: fits a swirl curve ψ(L) from a
 * window in which one chamber was known to be cold (a deliberate fuel-bias test or a confirmed
 * event). The rings of the window (thinned evenly to at most 20,000, running at synchronous
 * speed and some load) are each searched for the cold plume; the curve is fitted through the
 * plume angles against corrected load. Returns the curve, its residuals per load band and the
 * unit's current curve for comparison. Nothing is stored: a person decides whether to PATCH
 * the unit with it.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { calibrateSwirl, calibrationResidualSigmaDeg, correctedLoadFraction, swirlDeg, type CalibrationSample } from '../../core/index.ts';
import { checkUnitConfig } from '../../core/unit-config.ts';
import { whatIfOutcome } from '../../core/swirl-what-if.ts';
import type { SwirlPoint } from '../../core/types.ts';
import { versionInForce } from '../../db/units.ts';
import { notFound, unprocessable } from '../../http/errors.ts';
import { UnitConfigFields, UnitId } from '../schemas.ts';
import { readErrors, readsOf, timeWindow, unitOr404 } from './read-common.ts';
import { ErrorReply } from '../../http/schemas.ts';

export const CALIBRATION_MAX_DAYS = 31;
export const CALIBRATION_MAX_RINGS = 20_000;

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);

export const CalibrateBody = Type.Object(
  {
    from: Type.String({ format: 'date-time', description: 'start of a window in which the chamber was known to run cold (e.g. a fuel-bias test), at several loads' }),
    to: Type.String({ format: 'date-time', description: 'end of the window (exclusive); at most 31 days after from' }),
    chamber: Type.Integer({ minimum: 1, maximum: 64, description: 'the chamber known to be cold, numbered from 1' }),
    method: Type.Optional(Type.Union([Type.Literal('piecewise-linear'), Type.Literal('polynomial')], { default: 'piecewise-linear', description: 'piecewise-linear: one swirl per load band, joined; polynomial: a smooth curve of the given degree' })),
    degree: Type.Optional(Type.Integer({ minimum: 0, maximum: 3, description: 'polynomial degree' })),
  },
  { additionalProperties: false },
);

const Band = Type.Object({
  loadFrom: Type.Number(),
  loadTo: Type.Number(),
  n: Type.Integer(),
  meanSwirlDeg: Type.Number({ description: 'mean swirl found from the plume angles' }),
  fittedDeg: Type.Number(),
  currentCurveDeg: Type.Number({ description: 'the unit\'s configured curve at the band centre' }),
  residualMeanDeg: Type.Number(),
  residualSdDeg: Nullable(Type.Number()),
});

export const CalibrateReply = Type.Object({
  unitId: Type.String(),
  chamber: Type.Integer(),
  from: Type.String(),
  to: Type.String(),
  ringsInWindow: Type.Integer(),
  ringsExamined: Type.Integer(),
  fitted: Type.Boolean({ description: 'false when the window gave nothing to fit (see advice)' }),
  ringsUsed: Type.Integer({ description: 'rings in which a cold plume was found' }),
  rejected: Type.Integer(),
  method: Type.String(),
  sense: Type.Union([Type.Literal(1), Type.Literal(-1)]),
  curve: Type.Array(Type.Tuple([Type.Number(), Type.Number()]), { description: '[corrected load fraction, swirl degrees]: ready for PATCH /v1/units/:unitId swirl.curve' }),
  currentCurve: Type.Array(Type.Tuple([Type.Number(), Type.Number()])),
  rmsResidualDeg: Nullable(Type.Number()),
  robustResidualSigmaDeg: Nullable(Type.Number()),
  bands: Type.Array(Band),
  advice: Type.String(),
});

export const WHAT_IF_MAX_DAYS = 31;
export const WHAT_IF_MAX_RINGS = 5_000;

export const WhatIfBody = Type.Object(
  {
    curve: { ...UnitConfigFields.swirl.properties.curve, description: 'the candidate swirl curve: [corrected load fraction, swirl degrees] points sorted by load, as in the unit configuration; the unit\'s sense is kept' },
    from: Type.String({ format: 'date-time', description: 'start of the window of stored rings to re-map' }),
    to: Type.String({ format: 'date-time', description: `end of the window (exclusive); at most ${WHAT_IF_MAX_DAYS} days after from` }),
  },
  { additionalProperties: false },
);

const WhatIfChamber = Type.Object({
  chamber: Type.Integer({ description: 'numbered from 1' }),
  deviationC: Nullable(Type.Number({ description: 'mean chamber estimate over the window, from the average chamber, °C' })),
  residualC: Nullable(Type.Number({ description: 'deviation minus its normal in the same 5 % load band over the baseline reference window, mapped with the same curve, °C; null without a baseline' })),
  rank: Nullable(Type.Integer({ description: '1 = coldest (by residual, or by deviation without a baseline)' })),
  sensitivityCPerDeg: Nullable(Type.Number({ description: 'how far the estimate moves per degree of swirl error, °C per degree (central difference at ±1°)' })),
});

const WhatIfOutcomeSchema = Type.Object({
  curve: Type.Array(Type.Tuple([Type.Number(), Type.Number()])),
  ringsUsed: Type.Integer(),
  ringsWithoutNormal: Type.Integer({ description: 'rings of a load band the reference window did not cover: left out of the residuals' }),
  coldestChamber: Nullable(Type.Integer()),
  chambers: Type.Array(WhatIfChamber),
});

export const WhatIfReply = Type.Object({
  unitId: Type.String(),
  from: Type.String(),
  to: Type.String(),
  ringsInWindow: Type.Integer({ description: 'steady analysed rings in the window' }),
  ringsExamined: Type.Integer({ description: `after thinning evenly to at most ${WHAT_IF_MAX_RINGS}` }),
  reference: Nullable(Type.Object({ baselineVersion: Type.Integer(), from: Type.String(), to: Type.String(), rings: Type.Integer() }, { description: 'the window the normals are learnt from: the latest baseline\'s' })),
  current: WhatIfOutcomeSchema,
  candidate: WhatIfOutcomeSchema,
  callMoves: Type.Boolean({ description: 'the coldest chamber differs between the two curves' }),
  advice: Type.String(),
  stored: Type.Literal(false, { description: 'nothing is stored: PATCH the unit to adopt a curve' }),
});

/** Speed within this much of synchronous and load above this fraction for a ring to be used. */
const SPEED_TOLERANCE_PCT = 1.5;
const MIN_LOAD = 0.1;

export async function swirlRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.post('/v1/units/:unitId/swirl/calibrate', {
    schema: {
      tags: ['read'],
      summary: 'Fit a swirl curve from a window in which one chamber was known to be cold (stores nothing)',
      description: `The window is limited to ${CALIBRATION_MAX_DAYS} days; its rings are thinned evenly to at most ${CALIBRATION_MAX_RINGS}.`,
      params: Type.Object({ unitId: UnitId }),
      body: CalibrateBody,
      response: { 200: CalibrateReply, ...readErrors },
    },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const b = request.body;
    const w = timeWindow(b, Date.now(), 1, CALIBRATION_MAX_DAYS, 'A swirl calibration window');
    const config = versionInForce(unit.versions, w.toMs)?.config ?? unit.config;
    if (b.chamber > config.chambers.count) throw notFound(`Unit ${unit.id} has ${config.chambers.count} chambers; chamber ${b.chamber} does not exist (chambers are numbered from 1).`);
    const { total, rings } = await reads.ringsForCalibration(unit.id, w.fromMs, w.toMs, CALIBRATION_MAX_RINGS);
    const samples: CalibrationSample[] = [];
    for (const r of rings) {
      if (Math.abs(r.speedPct - 100) > SPEED_TOLERANCE_PCT) continue;
      const cfg = versionInForce(unit.versions, r.tsMs)?.config ?? config;
      const load = correctedLoadFraction(r.loadMw, r.ambientC, r.ambientKPa, cfg);
      if (!(load >= MIN_LOAD)) continue;
      samples.push({ loadFraction: load, readingsDegC: r.exhaustC });
    }
    const cal = samples.length ? calibrateSwirl(config, b.chamber, samples, { method: b.method ?? 'piecewise-linear', ...(b.degree !== undefined ? { degree: b.degree } : {}) }) : null;
    const base = { unitId: unit.id, chamber: b.chamber, from: new Date(w.fromMs).toISOString(), to: new Date(w.toMs).toISOString(), ringsInWindow: total, ringsExamined: rings.length, sense: config.swirl.sense, currentCurve: config.swirl.curve };
    if (!cal || cal.points.length === 0) {
      // Nothing to fit: say why, in the same shape, so a client need not branch on the status.
      const advice = total === 0
        ? `Unit ${unit.id} has no rings in this window; choose the window of the cold-chamber test.`
        : samples.length === 0
          ? `None of the ${total} rings of the window was at synchronous speed and above ${MIN_LOAD * 100} % corrected load; a calibration needs fired, loaded rings.`
          : `No cold plume was found in the ${samples.length} loaded rings of the window; is chamber ${b.chamber} the cold one, and is the window the test's?`;
      return { ...base, fitted: false, ringsUsed: 0, rejected: rings.length, method: b.method ?? 'piecewise-linear', curve: [], rmsResidualDeg: null, robustResidualSigmaDeg: null, bands: [], advice };
    }
    // Residuals per 5 % load band.
    const bands = new Map<number, number[]>();
    cal.points.forEach((p, i) => {
      const k = Math.floor(p.loadFraction / 0.05);
      const list = bands.get(k) ?? [];
      list.push(i);
      bands.set(k, list);
    });
    const bandRows = [...bands.entries()].sort((a, c) => a[0] - c[0]).map(([k, idx]) => {
      const pts = idx.map((i) => cal.points[i]);
      const mean = (f: (p: (typeof pts)[number]) => number) => pts.reduce((s, p) => s + f(p), 0) / pts.length;
      const rm = mean((p) => p.residualDeg);
      const sd = pts.length > 1 ? Math.sqrt(pts.reduce((s, p) => s + (p.residualDeg - rm) ** 2, 0) / (pts.length - 1)) : null;
      const centre = (k + 0.5) * 0.05;
      return { loadFrom: k * 0.05, loadTo: (k + 1) * 0.05, n: pts.length, meanSwirlDeg: mean((p) => p.swirlDeg), fittedDeg: mean((p) => p.fittedDeg), currentCurveDeg: swirlDeg(config.swirl.curve, centre), residualMeanDeg: rm, residualSdDeg: sd };
    });
    const rms = Number.isFinite(cal.rmsResidualDeg) ? cal.rmsResidualDeg : null;
    const sigma = calibrationResidualSigmaDeg(cal);
    const pitch = 360 / config.chambers.count;
    const advice = rms === null
      ? 'The fit failed; widen the window or check the chamber number.'
      : rms < pitch / 4
        ? `The fit is tight (RMS ${rms.toFixed(1)}°, a quarter chamber pitch is ${(pitch / 4).toFixed(1)}°). If it differs from the configured curve, update the unit's swirl curve with PATCH /v1/units/${unit.id}.`
        : `The residuals are wide (RMS ${rms.toFixed(1)}° against a chamber pitch of ${pitch.toFixed(1)}°): the plume may not be distinct enough, or the window holds rings from before or after the test. Do not adopt this curve without a second test.`;
    return {
      ...base,
      fitted: true,
      ringsUsed: cal.points.length,
      rejected: cal.rejected + (rings.length - samples.length),
      method: cal.method,
      curve: cal.curve.map(([l, d]) => [Math.round(l * 1000) / 1000, Math.round(d * 10) / 10] as [number, number]),
      rmsResidualDeg: rms,
      robustResidualSigmaDeg: Number.isFinite(sigma) ? sigma : null,
      bands: bandRows,
      advice,
    };
  });

  app.post('/v1/units/:unitId/swirl/what-if', {
    schema: {
      tags: ['read'],
      summary: 'Re-map stored rings with a candidate swirl curve: chamber ranking, residuals and sensitivity per degree under the current and the candidate curve (stores nothing)',
      description: `The window is limited to ${WHAT_IF_MAX_DAYS} days; its steady rings are thinned evenly to at most ${WHAT_IF_MAX_RINGS}, as are the reference window's.`,
      params: Type.Object({ unitId: UnitId }),
      body: WhatIfBody,
      response: { 200: WhatIfReply, ...readErrors, 422: ErrorReply },
    },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const b = request.body;
    const w = timeWindow(b, Date.now(), 1, WHAT_IF_MAX_DAYS, 'A swirl what-if window');
    const config = versionInForce(unit.versions, w.toMs)?.config ?? unit.config;
    const candidate = b.curve as SwirlPoint[];
    const problems = checkUnitConfig({ ...config, swirl: { ...config.swirl, curve: candidate } }).filter((p) => p.field.startsWith('swirl.curve'));
    if (problems.length) throw unprocessable(`The candidate curve is not usable: ${problems.map((p) => `${p.field.replace('swirl.', '')} ${p.reason}`).join('; ')}.`, problems.map((p) => ({ field: p.field.replace('swirl.', ''), reason: p.reason })));
    const [win, baseline] = await Promise.all([reads.steadyDeviations(unit.id, w.fromMs, w.toMs, WHAT_IF_MAX_RINGS), reads.latestBaseline(unit.id)]);
    const ref = baseline ? await reads.steadyDeviations(unit.id, Date.parse(baseline.windowFrom), Date.parse(baseline.windowTo), WHAT_IF_MAX_RINGS) : null;
    const rings = win.rings.map((r) => ({ loadFraction: r.loadFraction, deviationC: r.deviationC, validity: r.validity }));
    const refRings = ref ? ref.rings.map((r) => ({ loadFraction: r.loadFraction, deviationC: r.deviationC, validity: r.validity })) : null;
    const current = whatIfOutcome(config, config.swirl.curve, rings, refRings);
    const cand = whatIfOutcome(config, candidate, rings, refRings);
    const callMoves = current.coldestChamber !== cand.coldestChamber;
    const worst = (o: typeof current) => o.chambers.find((c) => c.chamber === o.coldestChamber);
    const sens = worst(current)?.sensitivityCPerDeg;
    const advice = win.total === 0
      ? `Unit ${unit.id} has no steady analysed ring in this window; choose a window with fired, steady running.`
      : callMoves
        ? `The call depends on the curve: chamber ${current.coldestChamber} is the coldest with the current curve, chamber ${cand.coldestChamber} with the candidate. Confirm the curve (a fuel-bias test and POST /v1/units/${unit.id}/swirl/calibrate) before opening either.`
        : `Both curves name chamber ${current.coldestChamber ?? '–'} the coldest${sens !== null && sens !== undefined ? `; its estimate moves ${Math.abs(sens).toFixed(2)} °C per degree of swirl error` : ''}.`;
    return {
      unitId: unit.id,
      from: new Date(w.fromMs).toISOString(),
      to: new Date(w.toMs).toISOString(),
      ringsInWindow: win.total,
      ringsExamined: win.rings.length,
      reference: baseline && ref ? { baselineVersion: baseline.version, from: baseline.windowFrom, to: baseline.windowTo, rings: ref.rings.length } : null,
      current,
      candidate: cand,
      callMoves,
      advice,
      stored: false as const,
    };
  });
}
