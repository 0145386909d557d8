/**
 * Findings of one analysed ring: one function from (ring analysis, recent history, baseline,
 * drift state, thresholds) to the findings a person should see, most severe first. It runs the
 * thermocouple, coverage, spread, chamber and drift rules and folds a spread finding that a
 * chamber finding explains into it. Stateless: on-delay, deadband and the life of an alert
 * belong to the worker.
 */
import { chamberFindings } from './chamber-findings.ts';
import { driftFindings } from './drift-findings.ts';
import { defaultThresholds, differenceText, gradeRank, maxGrade, type Finding, type FindingInput, type Thresholds } from './findings.ts';
import { spreadFindings } from './spread-findings.ts';
import { coverageFinding, thermocoupleFindings } from './thermocouple-findings.ts';

/** Evaluates every rule for one analysed ring. Returns findings, most severe first. */
export function evaluateFindings(input: FindingInput): Finding[] {
  const t = resolvedThresholds(input.thresholds);
  const a = input.analysis;
  const version = input.baseline ? input.baseline.version : null;
  const out: Finding[] = [];
  thermocoupleFindings(input, t, version, out);
  coverageFinding(a, t, version, out);
  spreadFindings(input, t, version, out);
  chamberFindings(input, t, version, out);
  driftFindings(input, t, version, out);
  if (out.length === 0) return out;
  return foldSpreadIntoChamber(out, a.chamberCount, input.temperatureUnit).sort(moreSevereFirst);
}

/** Threshold objects seen to name every threshold: used as they are, not merged over the defaults. */
const completeThresholds = new WeakSet<object>();

const THRESHOLD_KEYS = Object.keys(defaultThresholds);

/** The thresholds over the defaults; a complete set (as the worker passes on every ring) is used as it is. */
function resolvedThresholds(given: Partial<Thresholds> | undefined): Thresholds {
  if (given === undefined) return { ...defaultThresholds };
  if (completeThresholds.has(given)) return given as Thresholds;
  for (const k of THRESHOLD_KEYS) if (!Object.prototype.hasOwnProperty.call(given, k)) return { ...defaultThresholds, ...given };
  completeThresholds.add(given);
  return given as Thresholds;
}

function moreSevereFirst(x: Finding, y: Finding): number {
  return gradeRank(y.grade) - gradeRank(x.grade);
}

/** Two chambers (numbered from 1) of n are the same or neighbours on the ring. */
function adjacentOrSame(a: number, b: number, n: number): boolean {
  return a === b || (a - b + n) % n === 1 || (b - a + n) % n === 1;
}

/**
 * One event, one alert: a high spread or a spread jump that a chamber finding of the same ring
 * explains (it names that chamber or the one beside it) is folded into the chamber finding,
 * whose evidence and message then carry the spread and whose grade is the more severe of the
 * two (ISA-18.2 designed suppression of consequential alarms; a lost flame otherwise raises a
 * chamber alert, a spread alert and a jump alert at once).
 */
function foldSpreadIntoChamber(findings: Finding[], n: number, unit: 'C' | 'F' | undefined): Finding[] {
  let any = false;
  for (const f of findings) if ((f.kind === 'chamber_cold' || f.kind === 'chamber_hot') && f.chamber !== null) any = true;
  if (!any) return findings;
  const chambers = findings.filter((f) => (f.kind === 'chamber_cold' || f.kind === 'chamber_hot') && f.chamber !== null);
  return findings.filter((f) => {
    if ((f.kind !== 'spread_high' && f.kind !== 'spread_jump') || f.chamber === null) return true;
    const host = chambers.find((c) => adjacentOrSame(c.chamber as number, f.chamber as number, n));
    if (!host) return true;
    host.grade = maxGrade(host.grade, f.grade);
    if (f.kind === 'spread_high') {
      host.evidence = { ...host.evidence, spreadDegC: f.evidence.spreadDegC, spreadLimitDegC: f.evidence.limitDegC };
      host.message += `; exhaust spread ${differenceText(f.evidence.spreadDegC as number, unit)} is over its limit ${differenceText(f.evidence.limitDegC as number, unit)}`;
    } else {
      host.evidence = { ...host.evidence, spreadJumpDegC: f.evidence.jumpDegC };
      host.message += `; exhaust spread changed by ${differenceText(f.evidence.jumpDegC as number, unit)} since the previous steady ring`;
    }
    return false;
  });
}
