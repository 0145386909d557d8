/**
 * Closing a start: its record (phase timings, fuel, lighting, spreads at the end of warm-up and
 * at full speed no load), its findings (`chamber_unlit` for a chamber that stayed cold or lit
 * late, `start_failed` naming the phase a failed start stopped in), its counters, and the mode
 * the detector goes on in (running after a completed start, coasting after any other).
 */
import { attributeChamber, type ChamberAttribution } from './chambers.ts';
import { countClosedStart } from './start-counters.ts';
import { computeLighting, meanDeviation } from './start-lighting.ts';
import { medianOf, round } from './start-rings.ts';
import { START_PHASES, enterRun, type StartAnalyser, type StartDetectorState, type StartEvent, type StartFinding, type StartInProgress, type StartOutcome, type StartPhase, type StartPhaseTiming, type StartRecord } from './starts.ts';

export function finishStart(an: StartAnalyser, state: StartDetectorState, outcome: StartOutcome, stoppedIn: StartPhase | null, endMs: number, events: StartEvent[]): void {
  const c = state.current!;
  const o = an.options;
  if (c.at.flame_established !== undefined && c.lighting === null) c.lighting = computeLighting(an, c, endMs);
  const phases: StartPhaseTiming[] = [];
  const known = START_PHASES.filter((p) => c.at[p] !== undefined);
  for (let i = 0; i < known.length; i++) {
    const p = known[i];
    const start = c.at[p]!;
    const next = i + 1 < known.length ? c.at[known[i + 1]]! : endMs;
    const sp = c.speedAt[p];
    phases.push({ phase: p, startMs: start, durationS: Number.isFinite(next) ? Math.round((next - start) / 100) / 10 : null, speedPct: typeof sp === 'number' ? round(sp, 2) : null });
  }
  const warmEnd = c.at.acceleration ?? endMs;
  const tailSpreads = c.light.filter((p) => p.t <= warmEnd && p.t >= warmEnd - o.tailS * 1000 && p.spread !== null).map((p) => p.spread!);
  const record: StartRecord = {
    id: c.id,
    crankMs: c.crankMs,
    endMs,
    outcome,
    stoppedIn,
    phases,
    firingSpeedPct: round(c.speedAt.firing ?? NaN, 2),
    starterOffSpeedPct: c.at.starter_disengaged !== undefined ? round(c.speedAt.starter_disengaged ?? NaN, 2) : null,
    firingFuelKgS: round(c.firingFuelKgS, 4),
    warmupFuelKgS: c.warmupFuel.length ? round(medianOf(c.warmupFuel), 4) : null,
    flameSource: c.flameSource,
    lighting: c.lighting,
    crossfireCompleteS: c.lighting?.crossfireCompleteS ?? null,
    spreadEndOfWarmupDegC: c.at.warm_up !== undefined && c.at.acceleration !== undefined && tailSpreads.length ? round(medianOf(tailSpreads), 1) : null,
    spreadFsnlDegC: c.fsnlSpreads.length ? round(medianOf(c.fsnlSpreads), 1) : null,
    maxGapS: Math.round(c.maxGapS * 10) / 10,
    runEndMs: null,
    runEndedBy: null,
    findings: [],
    trace: c.trace,
  };
  record.findings = startFindings(an, c, record);
  countClosedStart(state.counters, c.at.flame_established !== undefined, outcome);
  events.push({ type: 'start', start: record });
  state.current = null;
  if (outcome === 'completed') enterRun(state, c.id, c.at.flame_established ?? endMs);
  else {
    state.mode = 'coasting';
    state.coastMinSpeedPct = state.prev?.speed ?? null;
    state.coastMinMs = endMs;
  }
}

const PHASE_WORDS: Record<StartPhase, string> = {
  cranking: 'cranking',
  firing: 'firing',
  flame_established: 'just after flame was established',
  warm_up: 'warm-up',
  acceleration: 'acceleration',
  starter_disengaged: 'acceleration after the starter disengaged',
  full_speed_no_load: 'full speed no load',
  synchronised: 'synchronising',
  loading: 'loading',
};

function startFindings(an: StartAnalyser, c: StartInProgress, rec: StartRecord): StartFinding[] {
  const o = an.options;
  const n = an.config.chambers.count;
  const out: StartFinding[] = [];
  const L = rec.lighting;
  const pitch = 360 / n;
  const attr: ChamberAttribution = { chamber: 0, likelihood: NaN, runnerUpChamber: null, runnerUpLikelihood: NaN };
  const flameMs = c.at.flame_established ?? rec.crankMs;
  if (L) {
    const lit = L.chambers.map((x) => (x.litAfterS === null ? null : flameMs + x.litAfterS * 1000));
    const othersLitMs = (k: number) => {
      let t = -Infinity;
      for (let j = 0; j < n; j++) {
        const d = Math.abs(j - k);
        if (Math.min(d, n - d) <= 1) continue;
        if (lit[j] !== null) t = Math.max(t, lit[j]!);
      }
      return t;
    };
    for (const ch of L.unlitChambers) {
      const k = ch - 1;
      const from = othersLitMs(k);
      const dev = meanDeviation(c.light, n, from, L.windowEndMs);
      attributeChamber(dev, k, pitch, o.startupSwirlUncertaintyDeg, attr);
      const endDev = L.chambers[k].endDeviationDegC;
      out.push({
        kind: 'chamber_unlit',
        grade: o.unlitGrade,
        chamber: ch,
        thermocouple: null,
        likelihood: round(attr.likelihood, 3),
        runnerUpChamber: attr.runnerUpChamber,
        runnerUpLikelihood: round(attr.runnerUpLikelihood, 3),
        evidence: {
          startId: rec.id,
          coldForS: Math.round((L.windowEndMs - from) / 1000),
          deviationDegC: round(dev[k], 1),
          endDeviationDegC: endDev,
          endDeficitFraction: L.chambers[k].endDeficitFraction,
          startupSwirlDeg: L.swirlDeg,
          windowEnd: new Date(L.windowEndMs).toISOString(),
        },
        baselineVersion: null,
        message: `chamber ${ch} did not light during the start: its sector stayed cold for ${Math.round((L.windowEndMs - from) / 1000)} s after the other chambers lit`,
        advice: `before the next start, check chamber ${ch} crossfire tubes and fuel nozzle (and its igniter or flame detector if it has one); borescope chamber ${ch} at the next opportunity`,
      });
    }
    for (const late of L.lateChambers) {
      const k = late.chamber - 1;
      const litMs = lit[k] ?? flameMs + late.lateByS * 1000;
      const dev = meanDeviation(c.light, n, litMs - late.lateByS * 1000, litMs);
      attributeChamber(dev, k, pitch, o.startupSwirlUncertaintyDeg, attr);
      out.push({
        kind: 'chamber_unlit',
        grade: o.lateGrade,
        chamber: late.chamber,
        thermocouple: null,
        likelihood: round(attr.likelihood, 3),
        runnerUpChamber: attr.runnerUpChamber,
        runnerUpLikelihood: round(attr.runnerUpLikelihood, 3),
        evidence: { startId: rec.id, lateByS: late.lateByS, deviationDegC: round(dev[k], 1), startupSwirlDeg: L.swirlDeg },
        baselineVersion: null,
        message: `chamber ${late.chamber} lit ${late.lateByS} s after the other chambers (slow crossfire)`,
        advice: `check chamber ${late.chamber} crossfire tubes at the next opportunity; watch its lighting at the next starts`,
      });
    }
  }
  if (rec.outcome === 'failed_to_fire' || rec.outcome === 'flame_lost_in_warmup' || rec.outcome === 'aborted') {
    const where = rec.stoppedIn ?? 'cranking';
    const what =
      rec.outcome === 'failed_to_fire' ? 'failed to fire: fuel was on but no flame was established'
      : rec.outcome === 'flame_lost_in_warmup' ? `lost its flame in ${PHASE_WORDS[where]}`
      : `was aborted in ${PHASE_WORDS[where]}`;
    const unlit = L?.unlitChambers ?? [];
    out.push({
      kind: 'start_failed',
      grade: o.failedGrade[rec.outcome],
      // One condition per unit: the chamber a failed start points to is in the evidence and in its chamber_unlit finding.
      chamber: null,
      thermocouple: null,
      likelihood: null,
      runnerUpChamber: null,
      runnerUpLikelihood: null,
      evidence: {
        startId: rec.id,
        outcome: rec.outcome,
        stoppedIn: where,
        crankAt: new Date(rec.crankMs).toISOString(),
        endedAt: new Date(rec.endMs).toISOString(),
        firingSpeedPct: rec.firingSpeedPct,
        maxSpeedPct: round(c.maxSpeed, 1),
        unlitChambers: unlit.length ? unlit.join(',') : null,
      },
      baselineVersion: null,
      message: `the start at ${new Date(rec.crankMs).toISOString()} ${what}`,
      advice:
        rec.outcome === 'failed_to_fire'
          ? "check the igniters, the fuel supply and the flame detectors before the next attempt; purge as the site's procedure requires"
          : unlit.length
            ? `see the chamber ${unlit.join(', ')} finding: a chamber that does not light is the likely cause; check its crossfire tubes before the next start`
            : "review the unit's own start sequence record and alarms for the cause before the next attempt",
    });
  }
  return out;
}
