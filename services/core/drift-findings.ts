/**
 * Drift rules: a chamber drifting at a significant rate (its interval excluding zero) of at
 * least the configured rate, only the strongest of neighbours drifting the same way, and none
 * where one thermocouple drifting alone explains it (that probe's finding names the drift): a
 * chamber whose plume covers that thermocouple at this ring's load. A chamber elsewhere on the
 * ring drifts for its own reasons and is raised.
 */
import { loneThermocouple } from './validity.ts';
import { differenceText, r1, type ChamberDriftInput, type Finding, type FindingInput, type Grade, type Thresholds } from './findings.ts';
import { tcFinding } from './thermocouple-findings.ts';

/** A drift state's rate when it is significant, else 0, °C per 30 days. */
function significantRate(d: ChamberDriftInput | null | undefined): number {
  return d && d.rate && d.rate.significant ? d.rate.per30DaysDegC : 0;
}

/**
 * The thermocouple drifting alone among the drift states, at a significant rate of at least
 * `minRate`. The states change once a night while findings run on every ring, so the answer is
 * kept per set of states, level and ring geometry.
 */
const loneDriftSeen = new WeakMap<object, Map<number, { left: ArrayLike<number>; lone: { index: number; value: number } | null }>>();

function loneDrift(
  sensors: readonly (ChamberDriftInput | null | undefined)[],
  share: { left: ArrayLike<number>; right: ArrayLike<number> },
  minRate: number,
): { index: number; value: number } | null {
  let byLevel = loneDriftSeen.get(sensors);
  if (!byLevel) loneDriftSeen.set(sensors, (byLevel = new Map()));
  const seen = byLevel.get(minRate);
  if (seen && seen.left === share.left) return seen.lone;
  const m = sensors.length;
  const rates = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    const d = sensors[i];
    rates[i] = d && d.rate ? d.rate.per30DaysDegC : NaN;
  }
  let lone = loneThermocouple(rates, m, share.left, share.right, minRate);
  if (lone && !sensors[lone.index]?.rate?.significant) lone = null;
  byLevel.set(minRate, { left: share.left, lone });
  return lone;
}

/**
 * Whether a thermocouple's own drift can explain chamber k's: k's plume covers the thermocouple
 * at this ring's load (response at least coverResponse). Without the responses every chamber
 * may be explained.
 */
function explainsChamber(share: NonNullable<FindingInput['plumeShare']>, tc: number, k: number, n: number): boolean {
  const r = share.response;
  if (!r || r.length < (tc + 1) * n) return true;
  return r[tc * n + k] >= (share.coverResponse ?? 0.1);
}

export function driftFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const chambers = input.drift?.chambers ?? [];
  const sensors = input.drift?.thermocouples ?? [];
  // A thermocouple drifting alone (its neighbours hold) explains the chamber drift the map makes of it.
  const share = input.plumeShare;
  const m = sensors.length;
  const lone = share && m >= 3 ? loneDrift(sensors, share, t.driftWarningDegCPer30Days) : null;
  const explained: number[] = [];
  for (let k = 0; k < chambers.length; k++) {
    const d = chambers[k];
    if (!d) continue;
    const rate = d.rate;
    const mag = Math.abs(significantRate(d));
    let grade: Grade | null = null;
    if (mag >= t.driftAlarmDegCPer30Days) grade = 'alarm';
    else if (mag >= t.driftWarningDegCPer30Days) grade = 'warning';
    // A CUSUM signal alone (no significant rate at the warning level) is shown with the trend, not raised.
    if (!grade || !rate) continue;
    // One plume drifting shows on the chambers either side too: only the strongest is reported.
    const n = chambers.length;
    const sign = Math.sign(rate.per30DaysDegC);
    const l = significantRate(chambers[(k - 1 + n) % n]) * sign;
    const r = significantRate(chambers[(k + 1) % n]) * sign;
    if (n > 1 && (l > mag || r > mag)) continue;
    if (lone && explainsChamber(share!, lone.index, k, n)) {
      explained.push(k + 1);
      continue;
    }
    const c = d.cusum;
    const cusumSide = c ? (c.lower > c.h ? 'down' : c.upper > c.h ? 'up' : null) : null;
    const cooling = rate.per30DaysDegC < 0;
    const ch = k + 1;
    out.push({
      kind: 'chamber_drift',
      grade,
      chamber: ch,
      thermocouple: null,
      likelihood: null,
      runnerUpChamber: null,
      runnerUpLikelihood: null,
      evidence: {
        ratePer30DaysDegC: r1(rate.per30DaysDegC),
        rateLowPer30DaysDegC: r1(rate.per30DaysInterval[0]),
        rateHighPer30DaysDegC: r1(rate.per30DaysInterval[1]),
        ratePer1000FiredHoursDegC: rate.per1000FiredHoursDegC !== null ? r1(rate.per1000FiredHoursDegC) : null,
        cusumUpper: c ? r1(c.upper) : null,
        cusumLower: c ? r1(c.lower) : null,
        cusumSignal: cusumSide,
      },
      baselineVersion: version,
      message: `chamber ${ch} is ${cooling ? 'cooling' : 'warming'} against its baseline at ${differenceText(rate.per30DaysDegC, unit)} per 30 days`,
      advice: cooling ? `inspect chamber ${ch} fuel nozzle at the next outage` : `inspect chamber ${ch} fuel nozzle tip for erosion or over-fuelling at the next outage`,
    });
  }
  if (lone) {
    const tc = lone.index + 1;
    const rate = sensors[lone.index]!.rate!;
    const [li, ri] = [(lone.index - 1 + m) % m, (lone.index + 1) % m];
    out.push(
      tcFinding(
        tc,
        'warning',
        'drifting_alone',
        {
          ratePer30DaysDegC: r1(rate.per30DaysDegC),
          rateLowPer30DaysDegC: r1(rate.per30DaysInterval[0]),
          rateHighPer30DaysDegC: r1(rate.per30DaysInterval[1]),
          leftNeighbourRatePer30DaysDegC: r1(sensors[li]?.rate?.per30DaysDegC ?? NaN),
          rightNeighbourRatePer30DaysDegC: r1(sensors[ri]?.rate?.per30DaysDegC ?? NaN),
          chamberDriftExplained: explained.join(',') || null,
        },
        version,
        `thermocouple ${tc} is drifting ${rate.per30DaysDegC < 0 ? 'down' : 'up'} against its normal at ${differenceText(rate.per30DaysDegC, unit)} per 30 days while its neighbours hold${explained.length ? `; the drift of chamber ${explained.join(', ')} is this sensor's` : ''}`,
      ),
    );
  }
}
