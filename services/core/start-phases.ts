/**
 * A start in progress, ring by ring: when each phase begins (firing, flame established, warm-up,
 * acceleration, starter disengaged, full speed no load, synchronised, loading), the lighting
 * points and the trace it keeps, and when the start ends and with which outcome. Instants
 * between rings are placed by the fuel and speed along their rise.
 */
import type { RingAnalysis } from './ring.ts';
import { computeLighting } from './start-lighting.ts';
import { finishStart } from './start-record.ts';
import { analyseStartRing, chamberArray, finiteOrNull, fuelOnOf, isNum, medianOf, round } from './start-rings.ts';
import { enterCoast, type LightPoint, type PrevRing, type StartAnalyser, type StartDetectorState, type StartEvent, type StartInProgress, type StartOptions, type StartOutcome, type StartPhase, type StartRing } from './starts.ts';

/**
 * One ring of a start in progress. Returns true when the start ended on this ring (the mode
 * has then changed to running or coasting).
 */
export function startStep(
  an: StartAnalyser,
  state: StartDetectorState,
  r: StartRing,
  prev: PrevRing | null,
  fired: boolean | null,
  fuel: number | null,
  load: number,
  dtS: number,
  events: StartEvent[],
): boolean {
  const o = an.options;
  const c = state.current!;
  const t = r.tMs;
  if (prev && prev.t >= c.crankMs) c.maxGapS = Math.max(c.maxGapS, dtS);
  c.maxSpeed = Math.max(c.maxSpeed, r.speedPct);
  const a = analyseStartRing(an, r);
  const mean = finiteOrNull(a.spread.meanDegC);
  const spread = finiteOrNull(a.spread.spreadDegC);
  const inLightWindow = c.at.flame_established !== undefined && c.at.acceleration === undefined;
  addTrace(c, r, fuel, fired, mean, spread, inLightWindow ? chamberArray(a) : null, o, inLightWindow);
  const rated = an.config.ratedPowerMw;
  const fuelOn = fuelOnOf(r, o);
  // When the flame went out (the first ring without it, once the loss is confirmed).
  const outAt = state.flameOffSinceMs ?? t;
  const finish = (outcome: StartOutcome, stoppedIn: StartPhase | null, endMs: number): true => {
    finishStart(an, state, outcome, stoppedIn, endMs, events);
    return true;
  };

  switch (c.phase) {
    case 'cranking': {
      if (c.crankMeanDegC === null && mean !== null) c.crankMeanDegC = mean;
      const flameByExhaust = fired === null && mean !== null && c.crankMeanDegC !== null && mean - c.crankMeanDegC >= o.flameExhaustRiseDegC;
      if (fuelOn === true || fired === true || flameByExhaust) {
        c.at.firing = t;
        c.speedAt.firing = r.speedPct;
        c.baseMeanDegC = mean ?? c.crankMeanDegC;
        c.phase = 'firing';
        if (fuel !== null && fuelOn) c.firingFuelKgS = fuel;
        if (fuelOn !== true) {
          // No fuel signal: firing is only seen as the flame.
          c.flameSource = fired === true ? 'detector' : 'exhaust';
          setFlame(c, t, r.speedPct, mean, spread, a);
        } else if (r.flameDetected === true) {
          c.flameSource = 'detector';
          setFlame(c, t, r.speedPct, mean, spread, a);
        }
        return false;
      }
      const fellBack = prev !== null && r.speedPct < o.crankSpeedPct && r.speedPct < c.maxSpeed;
      if (fellBack || t - c.crankMs > o.crankMaxS * 1000) {
        // Cranked without firing: not a start.
        state.current = null;
        state.mode = r.speedPct < o.crankSpeedPct ? 'idle' : 'coasting';
        if (state.mode === 'coasting') enterCoast(state, r);
        return true;
      }
      return false;
    }
    case 'firing': {
      if (fuel !== null && fuelOn) c.firingFuelKgS = Math.max(c.firingFuelKgS ?? 0, fuel);
      const detector = typeof r.flameDetected === 'boolean';
      const flame = detector ? r.flameDetected === true : mean !== null && c.baseMeanDegC !== null && mean - c.baseMeanDegC >= o.flameExhaustRiseDegC;
      if (flame) {
        c.flameSource = detector ? 'detector' : 'exhaust';
        setFlame(c, t, r.speedPct, mean, spread, a);
        return false;
      }
      if (fuelOn === false || t - (c.at.firing ?? t) > o.firingTimeoutS * 1000) return finish('failed_to_fire', 'firing', t);
      return false;
    }
    case 'flame_established':
    case 'warm_up': {
      if (c.phase === 'flame_established' && fuel !== null && fuelOn) c.firingFuelKgS = Math.max(c.firingFuelKgS ?? 0, fuel);
      pushLight(c, t, r.speedPct, mean, spread, a);
      if (fired === false) return finish('flame_lost_in_warmup', c.phase, outAt);
      if (c.phase === 'flame_established' && fuel !== null && c.firingFuelKgS !== null && fuel <= o.warmupCutRatio * c.firingFuelKgS) {
        c.at.warm_up = t;
        c.speedAt.warm_up = r.speedPct;
        c.phase = 'warm_up';
        c.warmupFuel = [fuel];
        c.lastInBandMs = t;
        return false;
      }
      const accelAt = c.phase === 'warm_up' && fuel !== null ? accelByFuel(c, t, fuel, o) : accelBySpeed(c, r.speedPct, o);
      if (accelAt !== null) {
        c.at.acceleration = accelAt;
        c.speedAt.acceleration = speedNear(c, accelAt) ?? r.speedPct;
        c.phase = 'acceleration';
        c.lighting = computeLighting(an, c, accelAt);
        // The trace keeps chamber estimates in the lighting window only; thin the points after it.
        c.light = c.light.filter((p) => p.t <= accelAt);
      }
      return false;
    }
    case 'acceleration':
    case 'starter_disengaged':
    case 'full_speed_no_load':
    case 'synchronised':
    case 'loading': {
      return laterPhases(an, state, c, r, prev, fired, load, spread, rated, outAt, finish);
    }
  }
  return false;
}

function laterPhases(
  an: StartAnalyser,
  state: StartDetectorState,
  c: StartInProgress,
  r: StartRing,
  prev: PrevRing | null,
  fired: boolean | null,
  load: number,
  spread: number | null,
  rated: number,
  outAt: number,
  finish: (outcome: StartOutcome, stoppedIn: StartPhase | null, endMs: number) => true,
): boolean {
  const o = an.options;
  const t = r.tMs;
  const beforeFsnl = c.phase === 'acceleration' || c.phase === 'starter_disengaged';
  if (beforeFsnl) {
    if (c.at.starter_disengaged === undefined && prev && prev.speed < o.starterOffSpeedPct && r.speedPct >= o.starterOffSpeedPct) {
      const f = (o.starterOffSpeedPct - prev.speed) / (r.speedPct - prev.speed);
      c.at.starter_disengaged = Math.round(prev.t + f * (t - prev.t));
      c.speedAt.starter_disengaged = o.starterOffSpeedPct;
      c.phase = 'starter_disengaged';
    }
    if (r.speedPct >= o.fsnlFitFromPct) c.fsnlBuf.push(t, r.speedPct);
    if (c.fsnlFirstMs === null && r.speedPct >= o.fsnlDetectPct) c.fsnlFirstMs = t;
    const synced = load > o.syncLoadFraction * rated;
    const settled = c.fsnlFirstMs !== null && approachSettled(c.fsnlBuf, t, o);
    if (settled || (synced && c.fsnlBuf.length > 0)) {
      const fsnl = fsnlInstant(c.fsnlBuf, o);
      if (c.at.starter_disengaged === undefined) {
        c.at.starter_disengaged = fsnl;
        c.speedAt.starter_disengaged = null;
      }
      c.at.full_speed_no_load = fsnl;
      c.speedAt.full_speed_no_load = speedInBuf(c.fsnlBuf, fsnl) ?? r.speedPct;
      c.phase = 'full_speed_no_load';
      c.fsnlBuf = [];
      // Spreads of the rings already past the full-speed instant (this ring's is added below).
      for (const p of c.trace) if (p.tMs >= fsnl && p.tMs < t && p.spreadDegC !== null) c.fsnlSpreads.push(p.spreadDegC);
    }
    if (fired === false || (fired === null && r.speedPct < c.maxSpeed - 10)) return finish('aborted', c.phase, fired === false ? outAt : t);
    if (c.phase !== 'full_speed_no_load') return false;
  }
  if (c.phase === 'full_speed_no_load') {
    if (spread !== null) c.fsnlSpreads.push(spread);
    if (load > o.syncLoadFraction * rated) {
      c.at.synchronised = t;
      c.speedAt.synchronised = r.speedPct;
      c.syncLoadMw = load;
      c.phase = 'synchronised';
      c.loadBuf = [t, load];
      return false;
    }
    if (fired === false) {
      const trip = Math.max(r.speedPct, prev?.speed ?? 0) >= o.tripMinSpeedPct && r.speedPct >= o.tripMinSpeedPct - 5;
      if (trip) return finish('aborted', 'full_speed_no_load', outAt);
      finish('completed', null, outAt);
      return true;
    }
    return false;
  }
  if (c.phase === 'synchronised') {
    c.loadBuf.push(t, load);
    const rise = o.loadingRiseFraction * rated;
    if (load >= (c.syncLoadMw ?? 0) + rise) {
      const at = loadingInstant(c.loadBuf, c.syncLoadMw ?? 0, c.at.synchronised ?? t);
      c.at.loading = at;
      c.speedAt.loading = r.speedPct;
      c.phase = 'loading';
      c.loadMaxMw = load;
      c.loadRiseMs = t;
      c.loadBuf = [];
      return false;
    }
  } else if (c.phase === 'loading') {
    const rise = o.loadingRiseFraction * rated;
    if (load >= (c.loadMaxMw ?? 0) + rise) {
      c.loadMaxMw = load;
      c.loadRiseMs = t;
    }
    if (t - (c.loadRiseMs ?? t) >= o.loadedSettleS * 1000) return finish('completed', null, c.loadRiseMs ?? t);
  }
  if (t - (c.at.synchronised ?? t) >= o.loadingMaxS * 1000) return finish('completed', null, t);
  if (fired === false || load < o.syncLoadFraction * rated * 0.5) {
    // The run ends (or the breaker opened) before the load settled: the start itself completed.
    finish('completed', null, fired === false ? outAt : t);
    return true;
  }
  void state;
  return false;
}

function setFlame(c: StartInProgress, t: number, speed: number, mean: number | null, spread: number | null, a: RingAnalysis): void {
  c.at.flame_established = t;
  c.speedAt.flame_established = speed;
  c.phase = 'flame_established';
  pushLight(c, t, speed, mean, spread, a);
}

function pushLight(c: StartInProgress, t: number, speed: number, mean: number | null, spread: number | null, a: RingAnalysis): void {
  if (c.light.length && c.light[c.light.length - 1].t === t) return;
  c.light.push({ t, speed, mean: round(mean, 2), spread: round(spread, 2), ch: chamberArray(a) });
}

function addTrace(
  c: StartInProgress,
  r: StartRing,
  fuel: number | null,
  fired: boolean | null,
  mean: number | null,
  spread: number | null,
  ch: (number | null)[] | null,
  o: StartOptions,
  dense: boolean,
): void {
  if (c.trace.length >= o.maxTracePoints) return;
  const sparse = c.phase === 'loading' || c.phase === 'synchronised' ? o.traceStepS * 3 : o.traceStepS;
  if (!dense && r.tMs - c.lastTraceMs < sparse * 1000) return;
  c.lastTraceMs = r.tMs;
  c.trace.push({
    tMs: r.tMs,
    speedPct: round(r.speedPct, 2)!,
    loadMw: round(isNum(r.loadMw) ? r.loadMw : 0, 3)!,
    fuelFlowKgS: round(fuel, 4),
    flame: fired,
    meanDegC: round(mean, 1),
    spreadDegC: round(spread, 1),
    chamberDegC: ch,
  });
}

function speedNear(c: StartInProgress, t: number): number | null {
  let best: LightPoint | null = null;
  for (const p of c.light) if (p.t <= t) best = p;
  return best ? best.speed : null;
}

/** Acceleration from the fuel: once the fuel rises clear of the warm-up level, it began where the fuel last stood in the band round that level. */
function accelByFuel(c: StartInProgress, t: number, fuel: number, o: StartOptions): number | null {
  const level = medianOf(c.warmupFuel);
  const dev = c.warmupFuel.map((x) => Math.abs(x - level));
  const sigma = 1.4826 * medianOf(dev);
  const band = Math.max(o.accelFuelBandFraction * level, o.accelFuelBandSigmas * sigma);
  if (fuel >= level * (1 + o.accelFuelRiseFraction) && fuel > level + band && c.warmupFuel.length >= 3) return c.lastInBandMs ?? t;
  if (fuel <= level + band) {
    c.lastInBandMs = t;
    c.warmupFuel.push(fuel);
  }
  return null;
}

/** Acceleration from the speed alone (no fuel flow): once the speed is clear above its flame-time value, it began where it last stood near that value. */
function accelBySpeed(c: StartInProgress, speed: number, o: StartOptions): number | null {
  const ref = c.speedAt.flame_established ?? c.speedAt.firing;
  if (ref === undefined || ref === null || speed < ref + o.accelSpeedRisePct) return null;
  let at: number | null = null;
  for (const p of c.light) if (p.speed <= ref + o.accelSpeedBandPct) at = p.t;
  return at;
}

/** Speeds of the approach buffer in the last fsnlSettleS, split in halves (earlier, later). */
function settleHalves(buf: number[], t: number, o: StartOptions): [number[], number[]] | null {
  const from = t - o.fsnlSettleS * 1000;
  const mid = t - o.fsnlSettleS * 500;
  const a: number[] = [];
  const b: number[] = [];
  let first = Infinity;
  for (let i = 0; i < buf.length; i += 2) {
    if (buf[i] < from) continue;
    first = Math.min(first, buf[i]);
    (buf[i] < mid ? a : b).push(buf[i + 1]);
  }
  if (a.length === 0 || b.length === 0 || t - first < 0.8 * o.fsnlSettleS * 1000) return null;
  return [a, b];
}

/** The approach to full speed is over when the median speed of the last half window is within fsnlBandPct of the half before. */
function approachSettled(buf: number[], t: number, o: StartOptions): boolean {
  const h = settleHalves(buf, t, o);
  return h !== null && Math.abs(medianOf(h[1]) - medianOf(h[0])) <= o.fsnlBandPct;
}

/**
 * Full speed no load: the settled speed is the median of the latest half window; the crossing is
 * the first point within fsnlBandPct of it; when a parabola fitted to the approach before the
 * crossing has its vertex (where the shaft stops accelerating) shortly after, that vertex.
 */
function fsnlInstant(buf: number[], o: StartOptions): number {
  const n = buf.length / 2;
  if (n === 0) return NaN;
  const lastT = buf[2 * (n - 1)];
  const h = settleHalves(buf, lastT, o);
  const settled = h ? medianOf(h[1]) : buf[2 * (n - 1) + 1];
  let cross = -1;
  for (let i = 0; i < n; i++) {
    if (buf[2 * i + 1] >= settled - o.fsnlBandPct) {
      cross = i;
      break;
    }
  }
  if (cross < 0) return lastT;
  const tc = buf[2 * cross];
  // Quadratic fit s = a + b·x + c·x², x = t − tc (s), over the approach points before the crossing.
  let s0 = 0, s1 = 0, s2 = 0, s3 = 0, s4 = 0, y0 = 0, y1 = 0, y2 = 0;
  for (let i = 0; i < cross; i++) {
    const x = (buf[2 * i] - tc) / 1000;
    const y = buf[2 * i + 1];
    const x2 = x * x;
    s0 += 1; s1 += x; s2 += x2; s3 += x2 * x; s4 += x2 * x2;
    y0 += y; y1 += x * y; y2 += x2 * y;
  }
  if (s0 < 4) return tc;
  const det = s0 * (s2 * s4 - s3 * s3) - s1 * (s1 * s4 - s3 * s2) + s2 * (s1 * s3 - s2 * s2);
  if (!(Math.abs(det) > 1e-12)) return tc;
  const b = (s0 * (y1 * s4 - s3 * y2) - y0 * (s1 * s4 - s3 * s2) + s2 * (s1 * y2 - y1 * s2)) / det;
  const cc = (s0 * (s2 * y2 - y1 * s3) - s1 * (s1 * y2 - y1 * s2) + y0 * (s1 * s3 - s2 * s2)) / det;
  if (!(cc < 0)) return tc;
  const vertexS = -b / (2 * cc);
  if (!(vertexS > 0)) return tc;
  return tc + Math.round(Math.min(vertexS, o.fsnlMaxExtrapolateS) * 1000);
}

function speedInBuf(buf: number[], t: number): number | null {
  let best: number | null = null;
  for (let i = 0; i < buf.length; i += 2) if (buf[i] <= t) best = buf[i + 1];
  return best;
}

/** Loading began where a straight line through the rising load meets the load taken at synchronising. */
function loadingInstant(buf: number[], syncLoad: number, syncMs: number): number {
  const n = buf.length / 2;
  let sx = 0, sy = 0, sxx = 0, sxy = 0, k = 0;
  const last = buf[2 * (n - 1)];
  for (let i = 0; i < n; i++) {
    const y = buf[2 * i + 1];
    if (y <= syncLoad) continue;
    const x = (buf[2 * i] - last) / 1000;
    sx += x; sy += y; sxx += x * x; sxy += x * y; k++;
  }
  if (k < 2) return last;
  const slope = (k * sxy - sx * sy) / (k * sxx - sx * sx);
  const icpt = (sy - slope * sx) / k;
  if (!(slope > 0)) return last;
  const x0 = (syncLoad - icpt) / slope;
  return Math.max(syncMs, Math.min(last, last + Math.round(x0 * 1000)));
}
