/**
 * Spread rules: a spread above the unit's limit at this load (its baseline's high quantile plus
 * a margin, or the default limit), and a jump in spread between consecutive steady rings, each
 * saying whether the coldest probe alone explains it.
 */
import type { RingAnalysis } from './ring.ts';
import { differenceText, r1, r3, spreadLimitDegC, type Finding, type FindingInput, type Grade, type Thresholds } from './findings.ts';
import { tcFinding } from './thermocouple-findings.ts';

/** Spread of the valid readings without thermocouple index `skip`, °C. */
function spreadWithout(a: RingAnalysis, skip: number): number {
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < a.thermocoupleCount; i++) {
    const d = a.deviationDegC[i];
    if (i === skip || !Number.isFinite(d)) continue;
    if (d < lo) lo = d;
    if (d > hi) hi = d;
  }
  return hi - lo;
}

export function spreadFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const a = input.analysis;
  const s = a.spread;
  if (!Number.isFinite(s.spreadDegC) || s.validCount < 2) return;
  const { limitDegC, fromBaseline } = spreadLimitDegC(input.baseline, a.loadFraction, t);
  const excess = s.spreadDegC - limitDegC;
  // The chamber a spread points at: the one furthest from its normal when residuals are known
  // (a hot chamber raises the spread from the top), else the coldest on the ring.
  const mapped = input.baseline ? input.residuals?.chamberDegC ?? null : null;
  let spreadChamber = a.coldestChamber;
  if (mapped) {
    let worst = -1;
    for (let k = 0; k < mapped.length; k++) if (Number.isFinite(mapped[k]) && (worst < 0 || Math.abs(mapped[k]) > Math.abs(mapped[worst]))) worst = k;
    if (worst >= 0) spreadChamber = worst + 1;
  }
  if (excess > 0) {
    const grade: Grade = excess >= t.spreadCriticalExcessDegC ? 'critical' : excess >= t.spreadAlarmExcessDegC ? 'alarm' : 'warning';
    // The sensor that departs alone (residuals.lone), when it is the hottest or the coldest
    // probe and the spread without it is inside the limit, is the spread's whole cause.
    const lone = input.baseline ? input.residuals?.lone ?? null : null;
    const loneCause = lone !== null && (lone.thermocouple === s.hottestThermocouple || lone.thermocouple === s.coldestThermocouple) && spreadWithout(a, lone.thermocouple - 1) <= limitDegC;
    // With residuals against a baseline, a probe is blamed only on its own departure (above);
    // without them, when the spread without the coldest probe is inside the limit and the two
    // coldest are not neighbours (the classic reading of a spread).
    const tcSuspect = loneCause || (!mapped && !s.coldestAdjacent && Number.isFinite(s.spreadExcl1DegC) && s.spreadExcl1DegC <= limitDegC);
    const cold = loneCause ? lone!.thermocouple : s.coldestThermocouple;
    const evidence = {
      spreadDegC: r1(s.spreadDegC),
      spreadExcl1DegC: r1(s.spreadExcl1DegC),
      spreadExcl2DegC: r1(s.spreadExcl2DegC),
      limitDegC: r1(limitDegC),
      limitFromBaseline: fromBaseline,
      coldestThermocouple: s.coldestThermocouple,
      hottestThermocouple: s.hottestThermocouple,
      suspectThermocouple: tcSuspect ? cold : null,
      secondColdestThermocouple: s.secondColdestThermocouple,
      coldestAdjacent: s.coldestAdjacent,
      loadFraction: r3(a.loadFraction),
    };
    const chamber = tcSuspect ? null : spreadChamber;
    out.push({
      kind: 'spread_high',
      grade: tcSuspect ? 'notice' : grade,
      chamber,
      thermocouple: tcSuspect ? cold : null,
      likelihood: null,
      runnerUpChamber: null,
      runnerUpLikelihood: null,
      evidence,
      baselineVersion: fromBaseline ? version : null,
      message: tcSuspect
        ? `exhaust spread ${differenceText(s.spreadDegC, unit)} is over the limit ${differenceText(limitDegC, unit)} only because of thermocouple ${cold}`
        : `exhaust spread ${differenceText(s.spreadDegC, unit)} is over the limit ${differenceText(limitDegC, unit)}`,
      advice: tcSuspect
        ? `check thermocouple ${cold} and its wiring at the next opportunity`
        : chamber !== null
          ? `compare with the unit's own exhaust spread protection; inspect chamber ${chamber} combustion at the next opportunity`
          : "compare with the unit's own exhaust spread protection readings",
    });
    if (tcSuspect && cold !== null && !loneCause) {
      out.push(tcFinding(cold, 'notice', 'isolated_outlier', { spreadDegC: r1(s.spreadDegC), spreadExcl1DegC: r1(s.spreadExcl1DegC), limitDegC: r1(limitDegC) }, version, `thermocouple ${cold} alone makes the spread high`));
    }
  }
  const prev = input.history?.previousSteadySpreadDegC;
  if (input.steady && typeof prev === 'number' && Number.isFinite(prev)) {
    const jump = s.spreadDegC - prev;
    if (Math.abs(jump) >= t.spreadJumpWarningDegC) {
      out.push({
        kind: 'spread_jump',
        grade: Math.abs(jump) >= t.spreadJumpAlarmDegC ? 'alarm' : 'warning',
        chamber: spreadChamber,
        thermocouple: null,
        likelihood: null,
        runnerUpChamber: null,
        runnerUpLikelihood: null,
        evidence: { spreadDegC: r1(s.spreadDegC), previousSpreadDegC: r1(prev), jumpDegC: r1(jump) },
        baselineVersion: version,
        message: `exhaust spread changed by ${differenceText(jump, unit)} between consecutive steady rings`,
        advice: 'look at the chamber and thermocouple findings raised with it; check the ring plot for a new cold or hot plume',
      });
    }
  }
}
