/**
 * One start of a unit against time (seconds after cranking began), in three panels on one time
 * axis: shaft speed and fuel flow; exhaust spread; each chamber's estimate (deviation from the
 * average chamber at the start-up swirl) through the lighting window. The phases are shaded in
 * alternating bands with their names; a chamber reported unlit is drawn thick, dashed and in
 * the cold colour, so the picture reads in grey too.
 */
import { PALETTE, c, diffIn, esc, niceStep, num, svgOpen } from './draw.ts';

export interface StartPlotInput {
  title: string;
  subtitle: string;
  temperatureUnit: 'C' | 'F';
  crankMs: number;
  endMs: number;
  phases: { phase: string; startMs: number; durationS: number | null }[];
  trace: {
    tMs: number;
    speedPct: number;
    fuelFlowKgS: number | null;
    spreadDegC: number | null;
    chamberDegC: (number | null)[] | null;
  }[];
  /** Chambers (from 1) to draw as unlit. */
  unlitChambers: number[];
  crossfireCompleteS: number | null;
  outcome: string;
}

const W = 780;
const L = 66;
const R = 66;
const T = 76;
const PANEL = [150, 110, 170];
const GAP = 26;
const B = 70;
const H = T + PANEL[0] + PANEL[1] + PANEL[2] + 2 * GAP + B;

const PHASE_LABEL: Record<string, string> = {
  cranking: 'crank',
  firing: 'fire',
  flame_established: 'flame',
  warm_up: 'warm-up',
  acceleration: 'accel',
  starter_disengaged: 'starter off',
  full_speed_no_load: 'full speed no load',
  synchronised: 'sync',
  loading: 'loading',
};


export function startSvg(p: StartPlotInput): string {
  const u = p.temperatureUnit;
  const pw = W - L - R;
  const t0 = p.crankMs;
  const lastT = Math.max(p.endMs, ...p.trace.map((x) => x.tMs));
  const spanS = Math.max(10, (lastT - t0) / 1000);
  const x = (tMs: number) => L + (((tMs - t0) / 1000) / spanS) * pw;
  const tops = [T, T + PANEL[0] + GAP, T + PANEL[0] + PANEL[1] + 2 * GAP];
  const out: string[] = [svgOpen(W, H, p.title)];
  out.push(`<text x="${L}" y="20" font-size="15" font-weight="bold">${esc(p.title)}</text>`);
  out.push(`<text x="${L}" y="38">${esc(p.subtitle)}</text>`);

  // Phase bands across all panels.
  const bottom = tops[2] + PANEL[2];
  out.push('<g class="phases">');
  p.phases.forEach((ph, i) => {
    const a = x(ph.startMs);
    const next = i + 1 < p.phases.length ? p.phases[i + 1].startMs : ph.durationS !== null ? ph.startMs + ph.durationS * 1000 : lastT;
    const b = Math.max(a, x(next));
    const fill = i % 2 === 0 ? '#f2f2f2' : '#ffffff';
    out.push(`<rect class="phase" data-phase="${esc(ph.phase)}" x="${c(a)}" y="${T}" width="${c(b - a)}" height="${c(bottom - T)}" fill="${fill}"><title>${esc(ph.phase.replace(/_/g, ' '))}: ${num(ph.durationS, 1)} s</title></rect>`);
    out.push(`<line x1="${c(a)}" x2="${c(a)}" y1="${T}" y2="${c(bottom)}" stroke="${PALETTE.grid}" stroke-width="0.6" stroke-dasharray="2 2"/>`);
    // Three rows of labels, so short phases side by side stay readable.
    out.push(`<text x="${c(a + 2)}" y="${T - 4 - (i % 3) * 10}" font-size="9">${esc(PHASE_LABEL[ph.phase] ?? ph.phase)}</text>`);
  });
  out.push('</g>');

  // Time axis (seconds after cranking began) under the last panel.
  const step = niceStep(spanS, 10);
  for (let s = 0; s <= spanS + 1e-9; s += step) {
    const px = L + (s / spanS) * pw;
    out.push(`<text x="${c(px)}" y="${c(bottom + 14)}" text-anchor="middle" font-size="10">${num(s, 0)}</text>`);
  }
  out.push(`<text x="${L + pw / 2}" y="${c(bottom + 30)}" text-anchor="middle">seconds after cranking began (${esc(new Date(t0).toISOString().slice(0, 19).replace('T', ' '))} UTC)</text>`);

  // Panel 1: speed (left axis, %) and fuel flow (right axis, kg/s).
  {
    const top = tops[0];
    const h = PANEL[0];
    const ys = (v: number) => top + h - (v / 105) * h;
    const fuelMax = Math.max(1e-6, ...p.trace.map((q) => q.fuelFlowKgS ?? 0)) * 1.1;
    const yf = (v: number) => top + h - (v / fuelMax) * h;
    for (const v of [0, 20, 40, 60, 80, 100]) {
      out.push(`<line x1="${L}" x2="${L + pw}" y1="${c(ys(v))}" y2="${c(ys(v))}" stroke="${PALETTE.faint}" stroke-width="0.6"/>`);
      out.push(`<text x="${L - 6}" y="${c(ys(v) + 4)}" text-anchor="end" font-size="10">${v}</text>`);
    }
    const fstep = niceStep(fuelMax, 4);
    for (let v = 0; v <= fuelMax; v += fstep) out.push(`<text x="${L + pw + 6}" y="${c(yf(v) + 4)}" font-size="10">${num(v, fstep < 0.1 ? 2 : 1)}</text>`);
    out.push(`<text x="14" y="${c(top + h / 2)}" transform="rotate(-90 14 ${c(top + h / 2)})" text-anchor="middle">speed %</text>`);
    out.push(`<text x="${W - 10}" y="${c(top + h / 2)}" transform="rotate(90 ${W - 10} ${c(top + h / 2)})" text-anchor="middle">fuel kg/s</text>`);
    const sp = p.trace.map((q, i) => `${i ? 'L' : 'M'}${c(x(q.tMs))},${c(ys(q.speedPct))}`);
    if (sp.length) out.push(`<path class="speed" d="${sp.join(' ')}" fill="none" stroke="${PALETTE.ink}" stroke-width="1.6"/>`);
    const fu: string[] = [];
    for (const q of p.trace) if (q.fuelFlowKgS !== null) fu.push(`${fu.length ? 'L' : 'M'}${c(x(q.tMs))},${c(yf(q.fuelFlowKgS))}`);
    if (fu.length) out.push(`<path class="fuel" d="${fu.join(' ')}" fill="none" stroke="${PALETTE.drift}" stroke-width="1.4" stroke-dasharray="5 2"/>`);
    out.push(`<rect x="${L}" y="${top}" width="${pw}" height="${h}" fill="none" stroke="${PALETTE.ink}" stroke-width="0.8"/>`);
  }

  // Panel 2: exhaust spread.
  {
    const top = tops[1];
    const h = PANEL[1];
    let hi = u === 'F' ? 36 : 20;
    for (const q of p.trace) if (q.spreadDegC !== null) hi = Math.max(hi, diffIn(u, q.spreadDegC)!);
    hi *= 1.1;
    const y = (v: number) => top + h - (v / hi) * h;
    const st = niceStep(hi, 4);
    for (let v = 0; v <= hi; v += st) {
      out.push(`<line x1="${L}" x2="${L + pw}" y1="${c(y(v))}" y2="${c(y(v))}" stroke="${PALETTE.faint}" stroke-width="0.6"/>`);
      out.push(`<text x="${L - 6}" y="${c(y(v) + 4)}" text-anchor="end" font-size="10">${num(v, 0)}</text>`);
    }
    out.push(`<text x="14" y="${c(top + h / 2)}" transform="rotate(-90 14 ${c(top + h / 2)})" text-anchor="middle">spread °${u}</text>`);
    const d: string[] = [];
    for (const q of p.trace) if (q.spreadDegC !== null) d.push(`${d.length ? 'L' : 'M'}${c(x(q.tMs))},${c(y(diffIn(u, q.spreadDegC)!))}`);
    if (d.length) out.push(`<path class="spread" d="${d.join(' ')}" fill="none" stroke="${PALETTE.cold}" stroke-width="1.5"/>`);
    out.push(`<rect x="${L}" y="${top}" width="${pw}" height="${h}" fill="none" stroke="${PALETTE.ink}" stroke-width="0.8"/>`);
  }

  // Panel 3: chamber estimates through the lighting window.
  {
    const top = tops[2];
    const h = PANEL[2];
    const withCh = p.trace.filter((q) => q.chamberDegC !== null);
    const n = withCh.reduce((m, q) => Math.max(m, q.chamberDegC!.length), 0);
    let lim = u === 'F' ? 18 : 10;
    for (const q of withCh) for (const v of q.chamberDegC!) if (v !== null) lim = Math.max(lim, Math.abs(diffIn(u, v)!));
    lim *= 1.1;
    const y = (v: number) => top + h / 2 - (v / lim) * (h / 2);
    const st = niceStep(lim, 3);
    for (let v = -Math.floor(lim / st) * st; v <= lim; v += st) {
      out.push(`<line x1="${L}" x2="${L + pw}" y1="${c(y(v))}" y2="${c(y(v))}" stroke="${v === 0 ? PALETTE.grid : PALETTE.faint}" stroke-width="0.6"/>`);
      out.push(`<text x="${L - 6}" y="${c(y(v) + 4)}" text-anchor="end" font-size="10">${num(v, 0)}</text>`);
    }
    out.push(`<text x="14" y="${c(top + h / 2)}" transform="rotate(-90 14 ${c(top + h / 2)})" text-anchor="middle">chamber °${u}</text>`);
    if (withCh.length === 0) out.push(`<text x="${L + pw / 2}" y="${c(top + h / 2)}" text-anchor="middle" class="empty">no chamber estimates (no flame in this start)</text>`);
    const unlit = new Set(p.unlitChambers);
    const order = [...Array(n).keys()].sort((a, b) => Number(unlit.has(a + 1)) - Number(unlit.has(b + 1)));
    out.push('<g class="chambers">');
    for (const k of order) {
      const d: string[] = [];
      for (const q of withCh) {
        const v = q.chamberDegC![k];
        if (v === null || v === undefined) continue;
        d.push(`${d.length ? 'L' : 'M'}${c(x(q.tMs))},${c(y(diffIn(u, v)!))}`);
      }
      if (!d.length) continue;
      const bad = unlit.has(k + 1);
      out.push(`<path class="chamber${bad ? ' unlit' : ''}" data-chamber="${k + 1}" d="${d.join(' ')}" fill="none" stroke="${bad ? PALETTE.cold : PALETTE.grid}" stroke-width="${bad ? 2.4 : 0.9}"${bad ? ' stroke-dasharray="7 3"' : ''}><title>chamber ${k + 1}${bad ? ' (unlit)' : ''}</title></path>`);
      if (bad) {
        const lastPt = withCh[withCh.length - 1];
        const v = lastPt.chamberDegC![k];
        if (v !== null && v !== undefined) out.push(`<text x="${c(x(lastPt.tMs) + 4)}" y="${c(y(diffIn(u, v)!) + 4)}" font-size="11" fill="${PALETTE.cold}">chamber ${k + 1}</text>`);
      }
    }
    out.push('</g>');
    if (p.crossfireCompleteS !== null) {
      const flame = p.phases.find((ph) => ph.phase === 'flame_established');
      if (flame) {
        const px = x(flame.startMs + p.crossfireCompleteS * 1000);
        out.push(`<line class="crossfire" x1="${c(px)}" x2="${c(px)}" y1="${top}" y2="${top + h}" stroke="${PALETTE.plume}" stroke-width="1.4"/>`);
        out.push(`<text x="${c(px + 3)}" y="${top + 12}" font-size="10">crossfire complete ${num(p.crossfireCompleteS, 1)} s</text>`);
      }
    }
    out.push(`<rect x="${L}" y="${top}" width="${pw}" height="${h}" fill="none" stroke="${PALETTE.ink}" stroke-width="0.8"/>`);
  }

  // Legend.
  const ly = H - 16;
  out.push(`<path d="M${L},${ly} h22" stroke="${PALETTE.ink}" stroke-width="1.6"/><text x="${L + 28}" y="${ly + 4}">speed</text>`);
  out.push(`<path d="M${L + 80},${ly} h22" stroke="${PALETTE.drift}" stroke-width="1.4" stroke-dasharray="5 2"/><text x="${L + 108}" y="${ly + 4}">fuel</text>`);
  out.push(`<path d="M${L + 150},${ly} h22" stroke="${PALETTE.cold}" stroke-width="1.5"/><text x="${L + 178}" y="${ly + 4}">spread</text>`);
  out.push(`<path d="M${L + 240},${ly} h22" stroke="${PALETTE.grid}" stroke-width="0.9"/><text x="${L + 268}" y="${ly + 4}">chamber</text>`);
  out.push(`<path d="M${L + 330},${ly} h22" stroke="${PALETTE.cold}" stroke-width="2.4" stroke-dasharray="7 3"/><text x="${L + 358}" y="${ly + 4}">unlit chamber</text>`);
  out.push(`<text x="${L + 460}" y="${ly + 4}">outcome: ${esc(p.outcome.replace(/_/g, ' '))}</text>`);
  out.push('</svg>');
  return out.join('');
}
