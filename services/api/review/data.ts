/**
 * The pre-outage review of one unit for combustion engineers, assembled: chambers ranked by
 * evidence (current residual, drift, CUSUM, alert history in the window), thermocouples to
 * replace, how well the swirl curve and plume model fit, the alerts of the window, the
 * pictures, what is not judged yet, and the cautions. Its two doors, GET
 * /v1/units/:unitId/review and `cansight report`, both call reviewData and then render it as
 * HTML (html.ts) or CSV (csv.ts).
 */
import { ADVISORY_CAUTION, defaultThresholds, type Thresholds } from '../../core/findings.ts';
import type { NotJudged } from '../../core/judgement.ts';
import type { AlertSummary, Grade, ReadsRepository } from '../../db/reads.ts';
import type { UnitRecord } from '../../db/units.ts';
import type { CallRow } from '../../db/outcomes.ts';
import type { MaintenanceEvent } from '../../db/events.ts';
import { trendSvg } from '../svg/trend.ts';
import { ringSvg } from '../svg/ring.ts';
import type { JudgementSettings } from '../schemas.ts';
import { chamberFigures, type ChamberRow } from '../routes/chambers.ts';
import { thermocoupleFigures, type ThermocoupleRow } from '../routes/thermocouples.ts';
import { chamberTrendInput, ringPlotInput } from '../routes/pictures.ts';
import { DAY_MS, timeWindow } from '../routes/read-common.ts';

export const REVIEW_MAX_DAYS = 400;
export const REVIEW_DEFAULT_DAYS = 90;

/** Weight of an alert in the evidence score, by grade. */
const GRADE_WEIGHT: Record<Grade, number> = { notice: 1, warning: 2, alarm: 4, critical: 8 };
const GRADE_RANK: Record<Grade, number> = { notice: 0, warning: 1, alarm: 2, critical: 3 };

export interface RankedChamber extends ChamberRow {
  rank: number;
  score: number;
  alertsInWindow: number;
  worstGradeInWindow: Grade | null;
  why: string[];
  nextStep: string;
}

export interface ReviewData {
  unit: { id: string; name: string; site: string; temperatureUnit: 'C' | 'F'; chambers: number; thermocouples: number; ratedPowerMw: number; swirl: UnitRecord['config']['swirl'] };
  from: string;
  to: string;
  generatedAt: string;
  latestTs: string | null;
  baseline: { version: number; windowFrom: string; windowTo: string; fittedAt: string; fittedBy: string; sampleCount: number } | null;
  chambers: RankedChamber[];
  thermocouples: ThermocoupleRow[];
  replace: ThermocoupleRow[];
  fit: { rings: number; meanFitSdC: number | null; p90FitSdC: number | null; meanWorstLikelihood: number | null; windowDays: number };
  alerts: AlertSummary[];
  /** Calls to inspect (chamber and thermocouple alerts) of the window, open ones first, with the outcomes recorded. */
  calls: CallRow[];
  /** Maintenance events of the window, oldest first. */
  events: MaintenanceEvent[];
  pictures: { ring: string | null; trends: Array<{ chamber: number; svg: string }> };
  /** What is not judged yet and why (no baseline, drift not computed…): said before the tables. */
  notJudged: NotJudged[];
  caution: string;
}

/**
 * Evidence score of a chamber (larger = stronger case to open it up): |residual| in units of
 * its daily scale (capped at 6), plus |drift per 30 days| in the same units when its interval
 * excludes zero (capped at 6), plus 2 for a CUSUM signal, plus the grade weights of its alerts
 * in the window (notice 1, warning 2, alarm 4, critical 8; capped at 16).
 */
export function evidenceScore(c: ChamberRow, alerts: AlertSummary[]): { score: number; why: string[] } {
  const why: string[] = [];
  const scale = c.sigmaC && c.sigmaC > 0.05 ? c.sigmaC : 1;
  let score = 0;
  if (c.residualC !== null) {
    const z = Math.min(6, Math.abs(c.residualC) / scale);
    score += z;
    if (z >= 2) why.push(`residual ${c.residualC > 0 ? 'hot' : 'cold'} by ${z.toFixed(1)} of its daily scale`);
  }
  if (c.driftCPer30d !== null && c.driftSignificant) {
    const z = Math.min(6, Math.abs(c.driftCPer30d) / scale);
    score += z;
    why.push(`drifting ${c.driftCPer30d < 0 ? 'colder' : 'hotter'} (interval excludes zero)`);
  }
  if (c.cusum?.signal) {
    score += 2;
    why.push(`CUSUM signals ${c.cusum.signal === 'down' ? 'colder' : 'hotter'}`);
  }
  const w = Math.min(16, alerts.reduce((s, a) => s + GRADE_WEIGHT[a.grade], 0));
  if (alerts.length) why.push(`${alerts.length} alert${alerts.length > 1 ? 's' : ''} in the window`);
  score += w;
  return { score: Math.round(score * 10) / 10, why };
}

/** The alert kinds that are findings about a chamber's combustion. */
const CHAMBER_KINDS = new Set(['chamber_cold', 'chamber_hot', 'chamber_drift']);

/**
 * What an engineer should do about a chamber at the outage. An inspection is advised only on a
 * finding (an alert of grade warning or worse about this chamber in the window) or on evidence
 * at or above the warning levels the alert rules use (a residual of 12 °C, a drift whose
 * interval excludes zero of 5 °C per 30 days: core/findings.ts defaultThresholds); below them,
 * "no action indicated", however many of its own daily scales the residual is (an outage's time
 * goes to what the review lists). Cold or hot by the finding, else by the evidence's sign.
 */
export function chamberNextStep(c: ChamberRow, alerts: AlertSummary[], t: Thresholds = defaultThresholds): string {
  const finding = alerts.filter((a) => a.chamber === c.chamber && CHAMBER_KINDS.has(a.kind) && GRADE_RANK[a.grade] >= GRADE_RANK.warning);
  // A chamber the ring cannot see now is not judged healthy: say so, and what would let it be seen.
  if (!c.observable && c.notObservableReason && finding.length === 0)
    return `Not judged: chamber ${c.chamber} is ${c.notObservableReason}, so the exhaust ring cannot clear it; restore the failed thermocouples near its plume, or borescope it if it must be cleared at this outage.`;
  const r = c.residualC;
  const residualBeyond = r !== null && (r <= -t.chamberColdWarningDegC || r >= t.chamberHotWarningDegC);
  const driftBeyond = c.driftSignificant && c.driftCPer30d !== null && Math.abs(c.driftCPer30d) >= t.driftWarningDegCPer30Days;
  if (finding.length === 0 && !residualBeyond && !driftBeyond) return 'No action indicated by the exhaust ring.';
  const cold = finding.length
    ? finding.some((a) => a.kind === 'chamber_cold') || (!finding.some((a) => a.kind === 'chamber_hot') && ((r ?? 0) < 0 || (c.driftCPer30d ?? 0) < 0))
    : residualBeyond
      ? (r as number) < 0
      : (c.driftCPer30d as number) < 0;
  return cold
    ? `Borescope chamber ${c.chamber}; inspect its fuel nozzle for plugging or coking and its check valve; look at the liner, transition piece and crossfire tubes.`
    : `Inspect chamber ${c.chamber} fuel nozzle tip for erosion and check its fuel split for over-fuelling.`;
}

/** The next step says to inspect (not "no action"). */
export function advisesInspection(step: string): boolean {
  return !step.startsWith('No action') && !step.startsWith('Not judged');
}

export async function reviewData(reads: ReadsRepository, unit: UnitRecord, q: { from?: string; to?: string }, nowMs: number, settings: JudgementSettings): Promise<ReviewData> {
  const latest = await reads.analysisNear(unit.id, null);
  // Without `to`, the window ends at the latest analysed ring (the unit may be shut down for the outage).
  const anchor = q.to ? undefined : latest ? Date.parse(latest.ts) + 1000 : nowMs;
  const w = timeWindow({ from: q.from, to: q.to ?? new Date(anchor!).toISOString() }, nowMs, REVIEW_DEFAULT_DAYS, REVIEW_MAX_DAYS, 'A pre-outage review');
  const fitFrom = Math.max(w.fromMs, w.toMs - 7 * DAY_MS);
  const [ch, tc, alerts, baseline, fit, readings, calls, events] = await Promise.all([
    chamberFigures(reads, unit, nowMs, settings),
    thermocoupleFigures(reads, unit, nowMs, settings),
    reads.unitAlerts(unit.id, w.fromMs, w.toMs, 2000),
    reads.latestBaseline(unit.id),
    reads.fitQuality(unit.id, fitFrom, w.toMs),
    latest ? reads.ringReadings(unit.id, latest.ts) : Promise.resolve(null),
    reads.calls([unit.id]),
    reads.events(unit.id, w.fromMs, w.toMs),
  ]);
  const ranked: RankedChamber[] = ch.chambers
    .map((c) => {
      const mine = alerts.filter((a) => a.chamber === c.chamber);
      const { score, why } = evidenceScore(c, mine);
      const worst = mine.reduce<Grade | null>((g, a) => (g === null || GRADE_RANK[a.grade] > GRADE_RANK[g] ? a.grade : g), null);
      return { ...c, rank: 0, score, why, alertsInWindow: mine.length, worstGradeInWindow: worst, nextStep: chamberNextStep(c, mine) };
    })
    .sort((a, b) => b.score - a.score || a.chamber - b.chamber)
    .map((c, i) => ({ ...c, rank: i + 1 }));
  const top = ranked.filter((c) => advisesInspection(c.nextStep)).slice(0, 3);
  const trends = await Promise.all(top.map(async (c) => ({ chamber: c.chamber, svg: trendSvg(await chamberTrendInput(reads, unit, c.chamber, w.fromMs, w.toMs)) })));
  return {
    unit: { id: unit.id, name: unit.name, site: unit.site, temperatureUnit: unit.config.temperatureUnit, chambers: unit.config.chambers.count, thermocouples: unit.config.thermocouples.count, ratedPowerMw: unit.config.ratedPowerMw, swirl: unit.config.swirl },
    from: new Date(w.fromMs).toISOString(),
    to: new Date(w.toMs).toISOString(),
    generatedAt: new Date(nowMs).toISOString(),
    latestTs: latest?.ts ?? null,
    baseline: baseline ? { version: baseline.version, windowFrom: baseline.windowFrom, windowTo: baseline.windowTo, fittedAt: baseline.fittedAt, fittedBy: baseline.fittedBy, sampleCount: baseline.sampleCount } : null,
    chambers: ranked,
    thermocouples: tc.rows,
    replace: tc.rows.filter((r) => r.replace),
    fit: { ...fit, windowDays: Math.round(((w.toMs - fitFrom) / DAY_MS) * 10) / 10 },
    alerts,
    events,
    calls: calls
      .filter((c) => { const t = Date.parse(c.raisedAt); return t >= w.fromMs && t < w.toMs; })
      .sort((a, b) => Number(a.outcome !== null) - Number(b.outcome !== null) || b.raisedAt.localeCompare(a.raisedAt)),
    pictures: { ring: latest ? ringSvg(ringPlotInput(unit, latest, readings)) : null, trends },
    // Chambers and thermocouples say the same of the baseline; each its own of drift.
    notJudged: [...ch.notJudged, ...tc.notJudged.filter((x) => x.part === 'drift').map((x) => ({ ...x, reason: x.reason.replace('No drift computed yet', 'No thermocouple drift computed yet') }))],
    caution: ADVISORY_CAUTION,
  };
}
