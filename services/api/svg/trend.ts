/**
 * A residual trend against time: the residual (value − baseline at the same corrected load)
 * as bucket means with their min–max whiskers, the baseline's normal band around zero, the
 * fitted drift line, and alert marks along the bottom by grade (shape and colour).
 */
import { PALETTE, c, diffIn, esc, eventMarks, num, svgOpen, niceStep, timeAxis, type EventMark } from './draw.ts';

export interface TrendPoint {
  /** Bucket start, ms since epoch. */
  tMs: number;
  meanC: number;
  minC: number | null;
  maxC: number | null;
  count: number;
}

export interface TrendPlotInput {
  title: string;
  subtitle: string;
  temperatureUnit: 'C' | 'F';
  fromMs: number;
  toMs: number;
  points: TrendPoint[];
  /** Normal band of the residual, ± °C around zero (baseline scale); null without a baseline. */
  bandC: number | null;
  baselineVersion: number | null;
  /** Drift line: residual = interceptC + slopeCPerDay · (t − fromMs) / day. */
  drift: { interceptC: number; slopeCPerDay: number; label: string } | null;
  alerts: Array<{ tMs: number; grade: 'notice' | 'warning' | 'alarm' | 'critical'; label: string }>;
  /** Maintenance events drawn as vertical lines. */
  events?: EventMark[];
  /** What the line is, for the axis and legend (default "residual"). */
  quantity?: string;
}

const W = 760;
const H = 340;
const L = 64;
const R = 20;
const T = 52;
const B = 70;
const DAY_MS = 86_400_000;


const GRADE_SHAPE: Record<string, (x: number, y: number) => string> = {
  notice: (x, y) => `<circle cx="${c(x)}" cy="${c(y)}" r="4" fill="${PALETTE.notice}" stroke="${PALETTE.ink}" stroke-width="0.6"/>`,
  warning: (x, y) => `<path d="M${c(x)},${c(y - 5)} l5,9 h-10 z" fill="${PALETTE.warning}" stroke="${PALETTE.ink}" stroke-width="0.6"/>`,
  alarm: (x, y) => `<rect x="${c(x - 4.5)}" y="${c(y - 4.5)}" width="9" height="9" fill="${PALETTE.alarm}" stroke="${PALETTE.ink}" stroke-width="0.6"/>`,
  critical: (x, y) => `<path d="M${c(x)},${c(y - 6)} l6,6 l-6,6 l-6,-6 z" fill="${PALETTE.critical}" stroke="${PALETTE.ink}" stroke-width="0.6"/>`,
};

export function trendSvg(p: TrendPlotInput): string {
  const u = p.temperatureUnit;
  const pw = W - L - R;
  const ph = H - T - B;
  const span = Math.max(1, p.toMs - p.fromMs);
  const values: number[] = [0];
  for (const pt of p.points) {
    for (const v of [pt.meanC, pt.minC, pt.maxC]) if (v !== null && Number.isFinite(v)) values.push(diffIn(u, v)!);
  }
  if (p.bandC !== null) values.push(diffIn(u, p.bandC)!, -diffIn(u, p.bandC)!);
  let lo = Math.min(...values);
  let hi = Math.max(...values);
  const pad = Math.max(2, (hi - lo) * 0.08);
  lo -= pad;
  hi += pad;
  const x = (t: number) => L + ((t - p.fromMs) / span) * pw;
  const y = (v: number) => T + ((hi - v) / (hi - lo)) * ph;
  const out: string[] = [svgOpen(W, H, p.title)];
  out.push(`<text x="${L}" y="20" font-size="15" font-weight="bold">${esc(p.title)}</text>`);
  out.push(`<text x="${L}" y="38">${esc(p.subtitle)}</text>`);
  // Grid and axes.
  const step = niceStep(hi - lo, 6);
  for (let v = Math.ceil(lo / step) * step; v <= hi; v += step) {
    out.push(`<line x1="${L}" x2="${L + pw}" y1="${c(y(v))}" y2="${c(y(v))}" stroke="${v === 0 ? PALETTE.ink : PALETTE.faint}" stroke-width="${v === 0 ? 1 : 0.7}"/>`);
    out.push(`<text x="${L - 6}" y="${c(y(v) + 4)}" text-anchor="end" font-size="10">${num(v, step < 1 ? 1 : 0)}</text>`);
  }
  out.push(`<text x="14" y="${c(T + ph / 2)}" transform="rotate(-90 14 ${c(T + ph / 2)})" text-anchor="middle">${esc(p.quantity ?? 'residual')} °${u}</text>`);
  out.push(timeAxis(p.fromMs, p.toMs, x, T, ph));
  out.push(`<rect x="${L}" y="${T}" width="${pw}" height="${ph}" fill="none" stroke="${PALETTE.ink}" stroke-width="0.8"/>`);
  // Baseline band.
  if (p.bandC !== null) {
    const b = diffIn(u, p.bandC)!;
    out.push(`<rect class="baseline-band" x="${L}" y="${c(y(b))}" width="${pw}" height="${c(y(-b) - y(b))}" fill="${PALETTE.band}" fill-opacity="0.22" stroke="${PALETTE.band}" stroke-dasharray="4 3"/>`);
  }
  // Points: whiskers and means.
  out.push('<g class="points">');
  const line: string[] = [];
  for (const pt of p.points) {
    const px = x(pt.tMs);
    if (pt.minC !== null && pt.maxC !== null) {
      out.push(`<line x1="${c(px)}" x2="${c(px)}" y1="${c(y(diffIn(u, pt.minC)!))}" y2="${c(y(diffIn(u, pt.maxC)!))}" stroke="${PALETTE.grid}" stroke-width="1"/>`);
    }
    line.push(`${line.length ? 'L' : 'M'}${c(px)},${c(y(diffIn(u, pt.meanC)!))}`);
  }
  if (line.length) out.push(`<path class="residual" d="${line.join(' ')}" fill="none" stroke="${PALETTE.cold}" stroke-width="1.8"/>`);
  out.push('</g>');
  // Drift line.
  if (p.drift) {
    const d = p.drift;
    const v0 = diffIn(u, d.interceptC)!;
    const v1 = diffIn(u, d.interceptC + (d.slopeCPerDay * span) / DAY_MS)!;
    out.push(`<line class="drift" x1="${L}" y1="${c(y(v0))}" x2="${L + pw}" y2="${c(y(v1))}" stroke="${PALETTE.drift}" stroke-width="2.2" stroke-dasharray="8 4"/>`);
  }
  out.push(eventMarks(p.events, p.fromMs, p.toMs, x, T, ph));
  // Alerts along the bottom.
  for (const a of p.alerts) {
    if (a.tMs < p.fromMs || a.tMs > p.toMs) continue;
    out.push(`<g class="alert" data-grade="${a.grade}">${GRADE_SHAPE[a.grade](x(a.tMs), T + ph - 10)}<title>${esc(a.label)}</title></g>`);
  }
  // Legend.
  const ly = H - 22;
  out.push(`<path d="M${L},${ly} h22" stroke="${PALETTE.cold}" stroke-width="1.8"/><text x="${L + 28}" y="${ly + 4}">${esc(p.quantity ?? 'residual')} (bucket mean, whisker min–max)</text>`);
  if (p.bandC !== null) out.push(`<rect x="${L + 290}" y="${ly - 6}" width="22" height="12" fill="${PALETTE.band}" fill-opacity="0.22" stroke="${PALETTE.band}" stroke-dasharray="4 3"/><text x="${L + 318}" y="${ly + 4}">normal band (baseline v${p.baselineVersion ?? '?'})</text>`);
  if (p.drift) out.push(`<path d="M${L + 500},${ly} h22" stroke="${PALETTE.drift}" stroke-width="2.2" stroke-dasharray="8 4"/><text x="${L + 528}" y="${ly + 4}">${esc(p.drift.label)}</text>`);
  out.push('</svg>');
  return out.join('');
}
