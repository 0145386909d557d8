/**
 * Small helpers shared by the SVG pictures: escaping, number formatting, the palette, and
 * polar-to-screen conversion with the unit's viewing convention. The palette is the
 * Okabe–Ito set, distinguishable with the common colour-vision deficiencies; every picture
 * also separates meanings by shape or line style so it reads in grey on paper.
 */

export const PALETTE = {
  ink: '#000000',
  grid: '#9a9a9a',
  faint: '#d9d9d9',
  cold: '#0072B2', // blue
  hot: '#D55E00', // vermillion
  valid: '#000000',
  invalid: '#CC79A7', // reddish purple
  plume: '#009E73', // bluish green
  band: '#56B4E9', // sky blue
  drift: '#E69F00', // orange
  notice: '#56B4E9',
  warning: '#E69F00',
  alarm: '#D55E00',
  critical: '#CC79A7',
} as const;

/** The words for a spread above its limit, in every picture and on the dashboard (never shouted). */
export const ABOVE_LIMIT = 'above limit';

/**
 * Text for SVG and HTML, in element content or a quoted attribute: markup characters and both
 * quotes escaped, and characters XML 1.0 does not allow (control characters other than tab,
 * line feed and carriage return; lone surrogates; U+FFFE, U+FFFF) shown as U+FFFD, so the
 * document stays well-formed whatever a name or a message holds.
 */
export function esc(text: string): string {
  return text
    .replace(/&/g, '&amp;')
    .replace(/</g, '&lt;')
    .replace(/>/g, '&gt;')
    .replace(/"/g, '&quot;')
    .replace(/'/g, '&#39;')
    .replace(/[\u0000-\u0008\u000B\u000C\u000E-\u001F\uFFFE\uFFFF]|[\uD800-\uDBFF](?![\uDC00-\uDFFF])|(?<![\uD800-\uDBFF])[\uDC00-\uDFFF]/g, '\uFFFD');
}

/** Fixed-point text for a coordinate or a reading; '–' for a missing value. */
export function num(v: number | null | undefined, digits = 1): string {
  return v === null || v === undefined || !Number.isFinite(v) ? '–' : v.toFixed(digits);
}

/** Coordinate text (two decimals, no trailing noise). */
export function c(v: number): string {
  return (Math.round(v * 100) / 100).toString();
}

/**
 * Screen position of ring angle θ at radius r: 0° at the top; angles increase clockwise when
 * the picture is seen looking downstream and anticlockwise looking upstream (the mirror image).
 */
export function polar(cx: number, cy: number, r: number, angleDeg: number, view: 'downstream' | 'upstream'): [number, number] {
  const a = ((view === 'upstream' ? -angleDeg : angleDeg) * Math.PI) / 180;
  return [cx + r * Math.sin(a), cy - r * Math.cos(a)];
}

/** A temperature difference in the unit's display unit. */
export function diffIn(unit: 'C' | 'F', degC: number | null | undefined): number | null {
  if (degC === null || degC === undefined || !Number.isFinite(degC)) return null;
  return unit === 'F' ? degC * 1.8 : degC;
}

/** An absolute temperature in the unit's display unit. */
export function tempIn(unit: 'C' | 'F', degC: number | null | undefined): number | null {
  if (degC === null || degC === undefined || !Number.isFinite(degC)) return null;
  return unit === 'F' ? degC * 1.8 + 32 : degC;
}

export function svgOpen(width: number, height: number, title: string): string {
  return `<svg xmlns="http://www.w3.org/2000/svg" width="${width}" height="${height}" viewBox="0 0 ${width} ${height}" font-family="DejaVu Sans, Arial, sans-serif" font-size="12" role="img" aria-label="${esc(title)}"><title>${esc(title)}</title><rect width="${width}" height="${height}" fill="#ffffff"/>`;
}

/** A round step (1, 2 or 5 × 10ⁿ) that cuts `span` into about `target` parts. */
export function niceStep(span: number, target: number): number {
  const raw = Math.max(span, 1e-9) / target;
  const mag = 10 ** Math.floor(Math.log10(raw));
  for (const m of [1, 2, 5, 10]) if (raw <= m * mag) return m * mag;
  return 10 * mag;
}

const DAY_MS = 86_400_000;

/**
 * The time axis of a plot area: a faint vertical line and a date (or date and time, for two
 * days or less) at round steps between fromMs and toMs.
 */
export function timeAxis(fromMs: number, toMs: number, x: (tMs: number) => number, top: number, height: number): string {
  const out: string[] = [];
  const days = Math.max(1, toMs - fromMs) / DAY_MS;
  const tickDays = days <= 2 ? 0.25 : niceStep(days, 8);
  for (let t = Math.ceil(fromMs / (tickDays * DAY_MS)) * tickDays * DAY_MS; t <= toMs; t += tickDays * DAY_MS) {
    out.push(`<line x1="${c(x(t))}" x2="${c(x(t))}" y1="${top}" y2="${top + height}" stroke="${PALETTE.faint}" stroke-width="0.7"/>`);
    const d = new Date(t).toISOString();
    out.push(`<text x="${c(x(t))}" y="${top + height + 14}" text-anchor="middle" font-size="10">${tickDays < 1 ? d.slice(5, 16).replace('T', ' ') : d.slice(0, 10)}</text>`);
  }
  return out.join('');
}

/** A maintenance event on a time axis: its time and its words ("thermocouple replaced: 7"). */
export interface EventMark {
  tMs: number;
  label: string;
}

/**
 * Maintenance events on a plot area: a dash-dot vertical line at each event's time (bluish
 * green, and dash-dot so it reads in grey) with a short label at the top, the whole words in
 * its title.
 */
export function eventMarks(events: readonly EventMark[] | undefined, fromMs: number, toMs: number, x: (tMs: number) => number, top: number, height: number): string {
  const out: string[] = [];
  for (const e of events ?? []) {
    if (e.tMs < fromMs || e.tMs > toMs) continue;
    const px = c(x(e.tMs));
    out.push(`<g class="event"><line x1="${px}" x2="${px}" y1="${top}" y2="${top + height}" stroke="${PALETTE.plume}" stroke-width="1.6" stroke-dasharray="7 3 2 3"/><text x="${c(x(e.tMs) + 3)}" y="${top + 11}" font-size="9" fill="${PALETTE.ink}">${esc(e.label.length > 28 ? e.label.slice(0, 27) + '…' : e.label)}</text><title>${esc(e.label)}</title></g>`);
  }
  return out.join('');
}
