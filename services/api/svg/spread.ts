/**
 * The exhaust spread of a unit against time: bucket means with min–max whiskers, the spread
 * limit as a stepped dashed line, buckets above their limit marked with a filled square (so it
 * reads without colour), and alert marks along the bottom by grade.
 */
import { ABOVE_LIMIT, PALETTE, c, diffIn, esc, eventMarks, num, svgOpen, niceStep, timeAxis, type EventMark } from './draw.ts';
import { gradeMark, type Grade } from './fleet.ts';

export interface SpreadPoint {
  tMs: number;
  meanC: number | null;
  minC: number | null;
  maxC: number | null;
  limitC: number | null;
}

export interface SpreadPlotInput {
  title: string;
  subtitle: string;
  temperatureUnit: 'C' | 'F';
  fromMs: number;
  toMs: number;
  points: SpreadPoint[];
  alerts: Array<{ tMs: number; grade: Grade; label: string }>;
  /** Maintenance events drawn as vertical lines. */
  events?: EventMark[];
}

const W = 760;
const H = 320;
const L = 64;
const R = 20;
const T = 52;
const B = 64;


export function spreadSvg(p: SpreadPlotInput): string {
  const u = p.temperatureUnit;
  const pw = W - L - R;
  const ph = H - T - B;
  const span = Math.max(1, p.toMs - p.fromMs);
  let hi = u === 'F' ? 36 : 20;
  for (const pt of p.points) for (const v of [pt.meanC, pt.maxC, pt.limitC]) if (v !== null && Number.isFinite(v)) hi = Math.max(hi, diffIn(u, v)!);
  hi *= 1.1;
  const lo = 0;
  const x = (t: number) => L + ((t - p.fromMs) / span) * pw;
  const y = (v: number) => T + ((hi - v) / (hi - lo)) * ph;
  const out: string[] = [svgOpen(W, H, p.title)];
  out.push(`<text x="${L}" y="20" font-size="15" font-weight="bold">${esc(p.title)}</text>`);
  out.push(`<text x="${L}" y="38">${esc(p.subtitle)}</text>`);
  const step = niceStep(hi - lo, 6);
  for (let v = 0; v <= hi; v += step) {
    out.push(`<line x1="${L}" x2="${L + pw}" y1="${c(y(v))}" y2="${c(y(v))}" stroke="${PALETTE.faint}" stroke-width="0.7"/>`);
    out.push(`<text x="${L - 6}" y="${c(y(v) + 4)}" text-anchor="end" font-size="10">${num(v, 0)}</text>`);
  }
  out.push(`<text x="14" y="${c(T + ph / 2)}" transform="rotate(-90 14 ${c(T + ph / 2)})" text-anchor="middle">exhaust spread °${u}</text>`);
  out.push(timeAxis(p.fromMs, p.toMs, x, T, ph));
  out.push(`<rect x="${L}" y="${T}" width="${pw}" height="${ph}" fill="none" stroke="${PALETTE.ink}" stroke-width="0.8"/>`);
  if (p.points.length === 0) out.push(`<text x="${L + pw / 2}" y="${T + ph / 2}" text-anchor="middle" class="empty">no analysed rings in this window</text>`);
  // Limit: stepped line through each bucket's limit.
  const lim: string[] = [];
  const line: string[] = [];
  const bw = p.points.length > 1 ? Math.max(1, (x(p.points[1].tMs) - x(p.points[0].tMs)) * 0.5) : 4;
  out.push('<g class="points">');
  for (const pt of p.points) {
    const px = x(pt.tMs);
    if (pt.limitC !== null) lim.push(`${lim.length ? 'L' : 'M'}${c(px - bw)},${c(y(diffIn(u, pt.limitC)!))} L${c(px + bw)},${c(y(diffIn(u, pt.limitC)!))}`);
    if (pt.minC !== null && pt.maxC !== null) out.push(`<line x1="${c(px)}" x2="${c(px)}" y1="${c(y(diffIn(u, pt.minC)!))}" y2="${c(y(diffIn(u, pt.maxC)!))}" stroke="${PALETTE.grid}" stroke-width="1"/>`);
    if (pt.meanC !== null) {
      line.push(`${line.length ? 'L' : 'M'}${c(px)},${c(y(diffIn(u, pt.meanC)!))}`);
      if (pt.limitC !== null && pt.meanC > pt.limitC) out.push(`<rect class="over-limit" x="${c(px - 3.5)}" y="${c(y(diffIn(u, pt.meanC)!) - 3.5)}" width="7" height="7" fill="${PALETTE.hot}" stroke="${PALETTE.ink}" stroke-width="0.6"/>`);
    }
  }
  if (line.length) out.push(`<path class="spread" d="${line.join(' ')}" fill="none" stroke="${PALETTE.cold}" stroke-width="1.8"/>`);
  if (lim.length) out.push(`<path class="limit" d="${lim.join(' ')}" fill="none" stroke="${PALETTE.ink}" stroke-width="1.4" stroke-dasharray="6 3"/>`);
  out.push('</g>');
  out.push(eventMarks(p.events, p.fromMs, p.toMs, x, T, ph));
  for (const a of p.alerts) {
    if (a.tMs < p.fromMs || a.tMs > p.toMs) continue;
    out.push(`<g class="alert" data-grade="${a.grade}">${gradeMark(a.grade, x(a.tMs), T + ph - 10, 0.8)}<title>${esc(a.label)}</title></g>`);
  }
  const ly = H - 20;
  out.push(`<path d="M${L},${ly} h22" stroke="${PALETTE.cold}" stroke-width="1.8"/><text x="${L + 28}" y="${ly + 4}">spread (bucket mean, whisker min–max)</text>`);
  out.push(`<path d="M${L + 290},${ly} h22" stroke="${PALETTE.ink}" stroke-width="1.4" stroke-dasharray="6 3"/><text x="${L + 318}" y="${ly + 4}">spread limit at the load</text>`);
  out.push(`<rect x="${L + 480}" y="${ly - 4}" width="7" height="7" fill="${PALETTE.hot}" stroke="${PALETTE.ink}" stroke-width="0.6"/><text x="${L + 494}" y="${ly + 4}">${ABOVE_LIMIT}</text>`);
  out.push('</svg>');
  return out.join('');
}
