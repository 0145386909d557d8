/**
 * A unit's starts one after another (oldest left, evenly spaced, so a run of daily starts and a
 * week of none read alike), in two panels on one axis: the crossfire completion time (seconds
 * from flame established until every chamber was lit) and the exhaust spread at full speed no
 * load. A dashed line is each panel's median over the starts shown, so a start that takes
 * longer or lights less evenly than usual stands out. A start whose crossfire never completed is
 * marked with a cross at the top of its panel, one that did not reach full speed no load with a
 * cross at the bottom of the spread panel; a start with an unlit or late chamber is drawn as an
 * open square, the others as filled circles, so the picture reads in grey too.
 */
import { PALETTE, c, diffIn, esc, niceStep, num, svgOpen } from './draw.ts';

export interface StartTrendPoint {
  startId: string;
  crankMs: number;
  outcome: string;
  crossfireCompleteS: number | null;
  spreadFsnlC: number | null;
  /** A chamber unlit or late in this start. */
  chamberFinding: boolean;
}

export interface StartTrendInput {
  title: string;
  subtitle: string;
  temperatureUnit: 'C' | 'F';
  /** Oldest first. */
  starts: StartTrendPoint[];
}

const W = 760;
const L = 64;
const R = 24;
const T = 56;
const PANEL = 120;
const GAP = 34;
const B = 74;
const H = T + 2 * PANEL + GAP + B;

function median(xs: number[]): number | null {
  if (!xs.length) return null;
  const s = xs.slice().sort((a, b) => a - b);
  const h = s.length >> 1;
  return s.length % 2 ? s[h] : (s[h - 1] + s[h]) / 2;
}

const words = (code: string) => code.replace(/_/g, ' ');

export function startTrendSvg(p: StartTrendInput): string {
  const u = p.temperatureUnit;
  const pw = W - L - R;
  const n = p.starts.length;
  const x = (i: number) => L + (n <= 1 ? pw / 2 : 12 + (i / (n - 1)) * (pw - 24));
  const out: string[] = [svgOpen(W, H, p.title)];
  out.push(`<text x="${L}" y="20" font-size="15" font-weight="bold">${esc(p.title)}</text>`);
  out.push(`<text x="${L}" y="38">${esc(p.subtitle)}</text>`);
  const panels = [
    { top: T, label: 'crossfire s', unit: 's', cls: 'crossfire', value: (s: StartTrendPoint) => s.crossfireCompleteS, missing: 'top' as const, missingText: 'crossfire not complete' },
    { top: T + PANEL + GAP, label: `spread °${u}`, unit: `°${u}`, cls: 'spread-fsnl', value: (s: StartTrendPoint) => diffIn(u, s.spreadFsnlC), missing: 'bottom' as const, missingText: 'did not reach full speed no load' },
  ];
  out.push(`<text x="${L}" y="${T - 6}" font-size="11">crossfire completion time, seconds after flame established</text>`);
  out.push(`<text x="${L}" y="${T + PANEL + GAP - 6}" font-size="11">exhaust spread at full speed no load</text>`);
  for (const panel of panels) {
    const { top } = panel;
    const values = p.starts.map(panel.value).filter((v): v is number => v !== null && Number.isFinite(v));
    const hi = Math.max(panel.cls === 'crossfire' ? 5 : u === 'F' ? 36 : 20, ...values) * 1.15;
    const y = (v: number) => top + PANEL - (v / hi) * PANEL;
    const step = niceStep(hi, 4);
    for (let v = 0; v <= hi; v += step) {
      out.push(`<line x1="${L}" x2="${L + pw}" y1="${c(y(v))}" y2="${c(y(v))}" stroke="${PALETTE.faint}" stroke-width="0.6"/>`);
      out.push(`<text x="${L - 6}" y="${c(y(v) + 4)}" text-anchor="end" font-size="10">${num(v, step < 1 ? 1 : 0)}</text>`);
    }
    out.push(`<text x="14" y="${c(top + PANEL / 2)}" transform="rotate(-90 14 ${c(top + PANEL / 2)})" text-anchor="middle">${esc(panel.label)}</text>`);
    const med = median(values);
    if (med !== null) {
      out.push(`<line class="median" x1="${L}" x2="${L + pw}" y1="${c(y(med))}" y2="${c(y(med))}" stroke="${PALETTE.ink}" stroke-width="1" stroke-dasharray="6 3"/>`);
      out.push(`<text x="${L + pw - 4}" y="${c(y(med) - 4)}" text-anchor="end" font-size="10">median ${num(med, 1)} ${esc(panel.unit)}</text>`);
    }
    const line: string[] = [];
    const marks: string[] = [];
    p.starts.forEach((s, i) => {
      const v = panel.value(s);
      const px = x(i);
      const tip = `${new Date(s.crankMs).toISOString().slice(0, 16).replace('T', ' ')} UTC, ${words(s.outcome)}: ${v === null ? panel.missingText : `${num(v, 1)} ${panel.unit}`}${s.chamberFinding ? ', a chamber unlit or late' : ''}`;
      if (v === null || !Number.isFinite(v)) {
        const py = panel.missing === 'top' ? top + 8 : top + PANEL - 8;
        marks.push(`<path class="missing" data-start="${esc(s.startId)}" d="M${c(px - 4)},${c(py - 4)} L${c(px + 4)},${c(py + 4)} M${c(px - 4)},${c(py + 4)} L${c(px + 4)},${c(py - 4)}" stroke="${PALETTE.hot}" stroke-width="2"><title>${esc(tip)}</title></path>`);
        return;
      }
      line.push(`${line.length ? 'L' : 'M'}${c(px)},${c(y(v))}`);
      marks.push(
        s.chamberFinding
          ? `<rect class="start finding" data-start="${esc(s.startId)}" x="${c(px - 4.5)}" y="${c(y(v) - 4.5)}" width="9" height="9" fill="#ffffff" stroke="${PALETTE.cold}" stroke-width="2"><title>${esc(tip)}</title></rect>`
          : `<circle class="start" data-start="${esc(s.startId)}" cx="${c(px)}" cy="${c(y(v))}" r="3.5" fill="${PALETTE.cold}"><title>${esc(tip)}</title></circle>`,
      );
    });
    out.push(`<g class="${panel.cls}">`);
    if (line.length > 1) out.push(`<path class="line" d="${line.join(' ')}" fill="none" stroke="${PALETTE.grid}" stroke-width="1"/>`);
    out.push(...marks, '</g>');
    out.push(`<rect x="${L}" y="${top}" width="${pw}" height="${PANEL}" fill="none" stroke="${PALETTE.ink}" stroke-width="0.8"/>`);
  }
  const bottom = T + 2 * PANEL + GAP;
  if (n === 0) out.push(`<text x="${L + pw / 2}" y="${c(T + PANEL / 2)}" text-anchor="middle" class="empty">no start in this window</text>`);
  // Start dates under the axis, at most about eight.
  const every = Math.max(1, Math.ceil(n / 8));
  for (let i = 0; i < n; i += every) {
    out.push(`<text x="${c(x(i))}" y="${bottom + 14}" text-anchor="middle" font-size="10">${new Date(p.starts[i].crankMs).toISOString().slice(5, 10)}</text>`);
  }
  out.push(`<text x="${L + pw / 2}" y="${bottom + 30}" text-anchor="middle">starts in order, oldest left (month-day of cranking, UTC)</text>`);
  const ly = H - 16;
  out.push(`<circle cx="${L + 6}" cy="${ly}" r="3.5" fill="${PALETTE.cold}"/><text x="${L + 16}" y="${ly + 4}">start</text>`);
  out.push(`<rect x="${L + 66}" y="${ly - 4.5}" width="9" height="9" fill="#ffffff" stroke="${PALETTE.cold}" stroke-width="2"/><text x="${L + 82}" y="${ly + 4}">a chamber unlit or late</text>`);
  out.push(`<path d="M${L + 246},${ly - 4} l8,8 M${L + 246},${ly + 4} l8,-8" stroke="${PALETTE.hot}" stroke-width="2"/><text x="${L + 260}" y="${ly + 4}">no value (not complete / not reached)</text>`);
  out.push(`<path d="M${L + 500},${ly} h22" stroke="${PALETTE.ink}" stroke-width="1" stroke-dasharray="6 3"/><text x="${L + 528}" y="${ly + 4}">median</text>`);
  out.push('</svg>');
  return out.join('');
}
