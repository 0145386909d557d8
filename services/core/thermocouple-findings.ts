/**
 * Thermocouple rules: a probe invalid in this ring or over the test window (with the reason as
 * evidence), a probe further from its normal than the ring while both neighbours hold, and
 * degraded coverage (too few valid thermocouples, or adjacent ones failed: a chamber can hide
 * behind dead sensors).
 */
import { blindChambers, type RingAnalysis } from './ring.ts';
import { VALIDITY, VALIDITY_REASONS, type ValidityReason } from './types.ts';
import { differenceText, r1, r3, type Finding, type FindingInput, type Grade, type Thresholds } from './findings.ts';

export function tcFinding(tc: number, grade: Grade, reason: ValidityReason, evidence: Finding['evidence'], version: number | null, message: string): Finding {
  return {
    kind: 'thermocouple_fault',
    grade,
    chamber: null,
    thermocouple: tc,
    likelihood: null,
    runnerUpChamber: null,
    runnerUpLikelihood: null,
    evidence: { reason, ...evidence },
    baselineVersion: version,
    message,
    advice: `check thermocouple ${tc} and its wiring at the next opportunity`,
  };
}

export function thermocoupleFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const a = input.analysis;
  const h = input.history ?? {};
  const seen = new Set<number>();
  for (let i = 0; i < a.thermocoupleCount; i++) {
    const code = a.validity[i];
    const tc = i + 1;
    if (code === VALIDITY.out_of_range) {
      out.push(tcFinding(tc, 'warning', 'out_of_range', {}, version, `thermocouple ${tc} reads outside the plausible range`));
      seen.add(tc);
    } else if (code === VALIDITY.isolated_outlier) {
      const n = h.recentOutlierCounts ? h.recentOutlierCounts[i] ?? 0 : 0;
      const grade: Grade = n >= t.outlierRecurringRings ? 'warning' : 'notice';
      out.push(tcFinding(tc, grade, 'isolated_outlier', { recentOutlierRings: n, ringCentreDegC: r1(a.spread.robustCentreDegC) }, version, `thermocouple ${tc} disagrees with both neighbours`));
      seen.add(tc);
    } else if (code === VALIDITY.missing) {
      const n = h.recentMissingCounts ? h.recentMissingCounts[i] ?? 0 : 0;
      if (n >= t.missingRecurringRings) {
        out.push(tcFinding(tc, 'notice', 'missing', { recentMissingRings: n }, version, `thermocouple ${tc} has not reported in ${n} recent rings`));
        seen.add(tc);
      }
    } else if (code !== VALIDITY.valid) {
      const reason = VALIDITY_REASONS[code];
      out.push(tcFinding(tc, 'warning', reason, {}, version, `thermocouple ${tc} is ${reason.replace('_', ' ')}`));
      seen.add(tc);
    }
  }
  const lone = input.baseline ? input.residuals?.lone ?? null : null;
  if (lone && !seen.has(lone.thermocouple)) {
    const tc = lone.thermocouple;
    const res = input.residuals!.thermocoupleDegC;
    const [l, r] = [(tc - 2 + a.thermocoupleCount) % a.thermocoupleCount, tc % a.thermocoupleCount];
    out.push(
      tcFinding(
        tc,
        'warning',
        'drifting_alone',
        { residualDegC: r1(lone.residualDegC), leftNeighbourResidualDegC: r1(res[l]), rightNeighbourResidualDegC: r1(res[r]), loadFraction: r3(a.loadFraction) },
        version,
        `thermocouple ${tc} reads ${differenceText(Math.abs(lone.residualDegC), unit)} ${lone.residualDegC < 0 ? 'below' : 'above'} its normal at this load while its neighbours hold: the sensor, not a chamber`,
      ),
    );
    seen.add(tc);
  }
  for (const v of h.windowVerdicts ?? []) {
    if (v.reason === 'valid' || seen.has(v.thermocouple)) continue;
    out.push(
      tcFinding(
        v.thermocouple,
        'warning',
        v.reason,
        { rangeDegC: r1(v.rangeDegC), stepRmsDegC: r1(v.stepRmsDegC), residualChangeDegC: r1(v.residualChangeDegC), rings: v.usableRings },
        version,
        `thermocouple ${v.thermocouple} is ${v.reason.replace('_', ' ')} over the recent window`,
      ),
    );
  }
}

export function coverageFinding(a: RingAnalysis, t: Thresholds, version: number | null, out: Finding[]): void {
  const c = a.coverage;
  // Chambers whose plume covers no valid thermocouple: no estimate, so nothing can be said of them.
  const blind = blindChambers(a.chamberDeviationDegC);
  if (!c.degraded && blind.length === 0) return;
  const grade: Grade = c.fraction < t.coverageAlarmFraction || c.longestInvalidRun >= t.coverageAlarmAdjacentInvalid ? 'alarm' : 'warning';
  const blindText = blind.length ? `; chamber${blind.length > 1 ? 's' : ''} ${blind.join(', ')} ${blind.length > 1 ? 'are' : 'is'} not observable (no valid thermocouple under ${blind.length > 1 ? 'their plumes' : 'its plume'})` : '';
  out.push({
    kind: 'coverage_degraded',
    grade,
    chamber: null,
    thermocouple: null,
    likelihood: null,
    runnerUpChamber: null,
    runnerUpLikelihood: null,
    evidence: {
      validCount: c.validCount,
      total: c.total,
      fraction: Math.round(c.fraction * 1000) / 1000,
      longestInvalidRun: c.longestInvalidRun,
      reason: c.degraded ? c.reason : 'blind_chambers',
      blindChambers: blind.length ? blind.join(',') : null,
    },
    baselineVersion: version,
    message: `only ${c.validCount} of ${c.total} thermocouples are usable (${c.longestInvalidRun} adjacent failed): a chamber can hide behind them${blindText}`,
    advice: 'restore the failed exhaust thermocouples at the next opportunity; until then treat chamber findings near them with caution',
  });
}
