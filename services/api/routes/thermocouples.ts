/**
 * Thermocouples of a unit: GET /v1/units/:unitId/thermocouples. Per thermocouple: its angle and
 * the chamber whose plume lands behind it at the latest load, whether it is used now (and why
 * not), its residual and drift, its validity history (share of rings not used per day over the
 * last 30 days, reasons over the last 7), and a verdict: keep, or check / replace.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type, type Static } from 'typebox';
import { VALIDITY_REASONS, chamberBehindAngle, thermocoupleAnglesDeg } from '../../core/index.ts';
import type { ReadsRepository } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import { NotJudgedList, UnitId, type JudgementSettings } from '../schemas.ts';
import { configOf } from './chambers.ts';
import { DAY_MS, fin, notJudgedOf, readErrors, readsOf, unitOr404 } from './read-common.ts';

const Nullable = <T extends Parameters<typeof Type.Union>[0][number]>(t: T) => Type.Union([t, Type.Null()]);

export const ThermocoupleRow = Type.Object({
  thermocouple: Type.Integer({ description: 'numbered from 1' }),
  angleDeg: Type.Number(),
  chamberBehind: Nullable(Type.Integer({ description: 'chamber (from 1) whose plume lands nearest at the latest corrected load' })),
  valid: Type.Boolean({ description: 'used in the latest analysed ring' }),
  reason: Nullable(Type.String({ description: 'why it was not used: missing, out_of_range, isolated_outlier, frozen, erratic, drifting_alone' })),
  deviationC: Nullable(Type.Number({ description: 'latest ring: reading minus the ring centre, °C' })),
  residualC: Nullable(Type.Number({ description: 'deviation minus its baseline at this load (latest steady ring, else latest daily value), °C' })),
  driftCPer30d: Nullable(Type.Number()),
  driftIntervalCPer30d: Nullable(Type.Tuple([Type.Number(), Type.Number()])),
  invalidShare: Nullable(Type.Number({ description: 'share of rings in which it was not used, over the 7 days up to the latest analysed ring' })),
  invalidReasons: Type.Record(Type.String(), Type.Integer(), { description: 'rings not used in the last 7 days, by reason' }),
  history: Type.Array(Type.Object({ day: Type.String(), invalidShare: Type.Number() }), { description: 'daily share of rings not used, last 30 days' }),
  openFault: Type.Boolean({ description: 'an open thermocouple_fault alert names it' }),
  replace: Type.Boolean({ description: 'advice: check the thermocouple and its wiring, replace at the next opportunity' }),
  verdict: Type.String(),
});
export type ThermocoupleRow = Static<typeof ThermocoupleRow>;

export const ThermocouplesReply = Type.Object({
  unitId: Type.String(),
  ts: Nullable(Type.String()),
  ringsLast7Days: Type.Integer(),
  thermocouples: Type.Array(ThermocoupleRow),
  notJudged: NotJudgedList,
  baselineDueTs: Nullable(Type.String({ format: 'date-time', description: 'ring time at which the automatic first baseline falls due, while the unit has none' })),
});

/** Share of rings not used above which a thermocouple is put on the replace list. */
export const REPLACE_INVALID_SHARE = 0.2;
const WINDOW_REASONS = new Set(['frozen', 'erratic', 'drifting_alone', 'out_of_range']);

export async function thermocoupleFigures(reads: ReadsRepository, unit: UnitRecord, nowMs: number, settings: JudgementSettings) {
  const latest = await reads.analysisNear(unit.id, null);
  // "The last week" is the last week of this unit's data, so history still reads after a silence.
  const end = latest ? Date.parse(latest.ts) + 1 : nowMs;
  const [drift, alerts, tally, daily] = await Promise.all([
    reads.driftStates(unit.id, 'thermocouple'),
    reads.unitAlerts(unit.id, nowMs, nowMs, 500),
    reads.validityTally(unit.id, end - 7 * DAY_MS, end),
    reads.rollupSeries(unit.id, 'day', end - 30 * DAY_MS, end, ['tc_invalid']),
  ]);
  const config = configOf(unit, latest);
  const angles = thermocoupleAnglesDeg(config);
  const load = latest?.loadFraction ?? null;
  const byIdx = new Map(drift.map((d) => [d.index, d]));
  const rows: ThermocoupleRow[] = Array.from(angles, (angle, i) => {
    const n = i + 1;
    const code = latest?.validity[i] ?? 0;
    const reason = latest && code !== 0 ? (VALIDITY_REASONS[code] ?? 'invalid') : null;
    const counts = tally.byThermocouple[i] ?? {};
    const invalidReasons: Record<string, number> = {};
    let invalid = 0;
    for (const [c, k] of Object.entries(counts)) {
      invalidReasons[VALIDITY_REASONS[Number(c)] ?? `code_${c}`] = k;
      invalid += k;
    }
    const invalidShare = tally.rings > 0 ? invalid / tally.rings : null;
    const d = byIdx.get(n);
    const openFault = alerts.some((a) => a.kind === 'thermocouple_fault' && a.thermocouple === n && a.active);
    const reasons: string[] = [];
    if (openFault) reasons.push('an open thermocouple fault alert');
    if (invalidShare !== null && invalidShare >= REPLACE_INVALID_SHARE) reasons.push(`not used in ${Math.round(invalidShare * 100)} % of the last week's rings`);
    if (reason && WINDOW_REASONS.has(reason)) reasons.push(`now ${reason.replace(/_/g, ' ')}`);
    const replace = reasons.length > 0;
    return {
      thermocouple: n,
      angleDeg: angle,
      chamberBehind: load === null ? null : chamberBehindAngle(config, angle, load) + 1,
      valid: !reason,
      reason,
      deviationC: fin(latest?.tcDeviationC[i]),
      residualC: fin(latest?.tcResidualC?.[i] ?? d?.lastValueC),
      driftCPer30d: fin(d?.rate?.per30DaysDegC),
      driftIntervalCPer30d: d?.rate?.per30DaysInterval && d.rate.per30DaysInterval.every(Number.isFinite) ? d.rate.per30DaysInterval : null,
      invalidShare,
      invalidReasons,
      history: daily.filter((r) => (r.n[i] ?? 0) > 0).map((r) => ({ day: new Date(r.bucketMs).toISOString().slice(0, 10), invalidShare: fin(r.mean[i]) ?? 0 })),
      openFault,
      replace,
      verdict: replace ? `check thermocouple ${n} and its wiring at the next opportunity (${reasons.join('; ')})` : 'keep',
    };
  });
  return { latest, rows, rings: tally.rings, ...(await notJudgedOf(reads, unit.id, latest, settings, drift.length)) };
}

export async function thermocoupleRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.get('/v1/units/:unitId/thermocouples', {
    schema: { tags: ['read'], summary: 'Per thermocouple: validity now and history, residual, drift, and whether to replace it', params: Type.Object({ unitId: UnitId }), response: { 200: ThermocouplesReply, ...readErrors } },
    config: { access: 'read' },
  }, async (request) => {
    const unit = await unitOr404(app, request.params.unitId);
    const { latest, rows, rings, notJudged, baselineDueTs } = await thermocoupleFigures(reads, unit, Date.now(), app.appConfig.worker);
    return { unitId: unit.id, ts: latest?.ts ?? null, ringsLast7Days: rings, thermocouples: rows, notJudged, baselineDueTs };
  });
}
