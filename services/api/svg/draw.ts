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

export function esc(text: string): string {
  return text.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;');
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
