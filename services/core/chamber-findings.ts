/**
 * Chamber rules: a chamber's residual (its estimate against its baseline at this load, with the
 * all-chamber common-mode movement removed) cold or hot beyond the limit and beyond its
 * uncertainty, or before a baseline exists beyond the default limit; named with the runner-up
 * chamber and its likelihood.
 */
import { baselineMedianScaleInto } from './baseline.ts';
import { attributeChamber, type ChamberAttribution } from './chambers.ts';
import { medianOfSorted, sortPrefixInPlace } from './stats.ts';
import { differenceText, gradeRank, r1, r3, type Finding, type FindingInput, type Grade, type Thresholds } from './findings.ts';

export function chamberFindings(input: FindingInput, t: Thresholds, version: number | null, out: Finding[]): void {
  const unit = input.temperatureUnit;
  const a = input.analysis;
  const n = a.chamberCount;
  const resid = chamberScratch(0, n);
  const scale = chamberScratch(1, n);
  let usedBaseline = false;
  const mapped = input.baseline ? input.residuals?.chamberDegC ?? null : null;
  for (let k = 0; k < n; k++) {
    const dev = a.chamberDeviationDegC[k];
    const b = input.baseline && input.baseline.chambers[k] && baselineMedianScaleInto(input.baseline.chambers[k], a.loadFraction, chamberBaseline) ? chamberBaseline : null;
    if (b) usedBaseline = true;
    resid[k] = mapped ? (Number.isFinite(dev) ? mapped[k] : NaN) : b ? dev - b.median : dev;
    scale[k] = b ? b.scale : 0;
  }
  if (mapped) usedBaseline = true;
  const cm = removeCommonModeInto(resid, n, chamberScratch(2, n), chamberScratch(3, n));
  const r = cm.residualsDegC;
  const factor = usedBaseline ? 1 : t.noBaselineChamberFactor;
  const pitch = 360 / n;
  const attr: ChamberAttribution = { chamber: 0, likelihood: NaN, runnerUpChamber: null, runnerUpLikelihood: NaN };
  for (let k = 0; k < n; k++) {
    const v = r[k];
    if (!Number.isFinite(v)) continue;
    // With mapped residuals, their own uncertainty: how well the map fits the departures, not
    // the ring (whose built-in asymmetry the plume kernel fits less well).
    const u = mapped && input.residuals?.chamberUncertaintyDegC ? input.residuals.chamberUncertaintyDegC[k] : a.chamberUncertaintyDegC[k];
    const sigma = Math.max(Number.isFinite(u) ? u : 0, scale[k]);
    if (Math.abs(v) < t.chamberMinZ * sigma) continue;
    const cold = v < 0;
    const mag = Math.abs(v);
    const [w, al, cr] = cold
      ? [t.chamberColdWarningDegC, t.chamberColdAlarmDegC, t.chamberColdCriticalDegC]
      : [t.chamberHotWarningDegC, t.chamberHotAlarmDegC, t.chamberHotCriticalDegC];
    if (mag < (usedBaseline ? w : Math.max(w * factor, t.chamberNoBaselineWarningDegC))) continue;
    // Only the deepest chamber of a plume is reported: skip k when a neighbour is deeper in the same sense.
    const l = (k - 1 + n) % n;
    const rr = (k + 1) % n;
    if ((cold && (r[l] < v || r[rr] < v)) || (!cold && (r[l] > v || r[rr] > v))) continue;
    const grade: Grade = mag >= cr * factor ? 'critical' : mag >= al * factor ? 'alarm' : 'warning';
    attributeChamber(r, k, pitch, t.swirlUncertaintyDeg, attr);
    const ch = k + 1;
    out.push({
      kind: cold ? 'chamber_cold' : 'chamber_hot',
      grade,
      chamber: ch,
      thermocouple: null,
      likelihood: Math.round(attr.likelihood * 1000) / 1000,
      runnerUpChamber: attr.runnerUpChamber,
      runnerUpLikelihood: Math.round(attr.runnerUpLikelihood * 1000) / 1000,
      evidence: {
        residualDegC: r1(v),
        chamberDeviationDegC: r1(a.chamberDeviationDegC[k]),
        uncertaintyDegC: r1(u),
        baselineScaleDegC: usedBaseline ? r1(scale[k]) : null,
        commonModeDegC: r1(cm.commonModeDegC + (mapped ? input.residuals?.chamberCommonModeDegC ?? 0 : 0)),
        swirlDeg: r1(a.swirlDeg),
        loadFraction: r3(a.loadFraction),
        validThermocouples: a.coverage.validCount,
      },
      baselineVersion: usedBaseline ? version : null,
      message: `chamber ${ch} runs ${differenceText(mag, unit)} ${cold ? 'colder' : 'hotter'} than its normal at this load`,
      advice: chamberAdvice(ch, cold, grade),
    });
  }
}

/**
 * Working arrays of chamberFindings, kept between calls (findings run on every ring in
 * service): four per chamber count, none of them part of what a finding keeps.
 */
const chamberScratchByN = new Map<number, Float64Array[]>();

/** One chamber's baseline median and scale at the ring's load, read before the next chamber's. */
const chamberBaseline = { median: NaN, scale: NaN };

function chamberScratch(which: number, n: number): Float64Array {
  let set = chamberScratchByN.get(n);
  if (!set) chamberScratchByN.set(n, (set = [new Float64Array(n), new Float64Array(n), new Float64Array(n), new Float64Array(n)]));
  return set[which];
}

/**
 * drift.ts removeCommonMode of the first n values into `out`, with `sorted` as room for the
 * sort: the same common mode (the median of the finite values) and the same residuals.
 */
function removeCommonModeInto(values: Float64Array, n: number, sorted: Float64Array, out: Float64Array): { commonModeDegC: number; residualsDegC: Float64Array } {
  let nf = 0;
  for (let i = 0; i < n; i++) if (Number.isFinite(values[i])) sorted[nf++] = values[i];
  sortPrefixInPlace(sorted, nf);
  const cm = medianOfSorted(sorted, nf);
  const finiteCm = Number.isFinite(cm);
  for (let i = 0; i < n; i++) {
    const v = values[i];
    out[i] = finiteCm && Number.isFinite(v) ? v - cm : NaN;
  }
  return { commonModeDegC: cm, residualsDegC: out };
}

function chamberAdvice(ch: number, cold: boolean, grade: Grade): string {
  if (cold && gradeRank(grade) >= gradeRank('alarm'))
    return `check chamber ${ch} flame and crossfire against the unit's own protection readings now; borescope chamber ${ch} liner and transition piece at the next outage`;
  if (cold) return `inspect chamber ${ch} fuel nozzle at the next outage`;
  return `inspect chamber ${ch} fuel nozzle tip for erosion or over-fuelling at the next outage`;
}
