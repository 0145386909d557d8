/**
 * The exhaust ring as a polar plot: each thermocouple's deviation from the ring's robust centre
 * drawn outward (hotter) or inward (colder) from a reference circle, invalid thermocouples
 * marked with a cross and their reason, chambers at their positions on an outer circle, and
 * each chamber's plume position (where the swirl carries it at this load) on the reference
 * circle, joined to its chamber by a thin line. Spread and its limit are written underneath.
 */
import { ABOVE_LIMIT, PALETTE, c, diffIn, esc, num, polar, svgOpen, tempIn } from './draw.ts';

export interface RingPlotThermocouple {
  /** Numbered from 1. */
  number: number;
  angleDeg: number;
  readingC: number | null;
  deviationC: number | null;
  valid: boolean;
  reason: string | null;
}

export interface RingPlotChamber {
  number: number;
  angleDeg: number;
  plumeAngleDeg: number;
  deviationC: number | null;
  /** Why the ring has no estimate of this chamber (drawn hatched, "not observable"); null or absent when it has one. */
  notObservableReason?: string | null;
}

export interface RingPlotInput {
  title: string;
  ts: string | null;
  temperatureUnit: 'C' | 'F';
  view: 'downstream' | 'upstream';
  loadFraction: number | null;
  swirlDeg: number | null;
  spreadC: number | null;
  limitC: number | null;
  thermocouples: RingPlotThermocouple[];
  chambers: RingPlotChamber[];
}

const W = 560;
const H = 650;
const CX = 280;
const CY = 318;
const R_REF = 150; // reference circle: the ring's robust centre
const R_CHAMBER = 245;
const R_LABEL = 210;

export function ringSvg(p: RingPlotInput): string {
  const u = p.temperatureUnit;
  const maxDev = Math.max(20, ...p.thermocouples.map((t) => (t.valid && t.deviationC !== null ? Math.abs(t.deviationC) : 0)));
  const scale = 90 / maxDev; // px per °C; the largest deviation reaches 90 px from the circle
  const out: string[] = [svgOpen(W, H, `${p.title}: exhaust ring`)];
  out.push(`<text x="${CX}" y="22" text-anchor="middle" font-size="15" font-weight="bold">${esc(p.title)}</text>`);
  out.push(`<text x="${CX}" y="40" text-anchor="middle">${esc(p.ts ?? 'no ring analysed yet')} · viewed looking ${p.view}</text>`);
  // Reference and scale circles.
  out.push(`<circle cx="${CX}" cy="${CY}" r="${R_REF}" fill="none" stroke="${PALETTE.ink}" stroke-width="1.2"/>`);
  for (const d of [-maxDev / 2, maxDev / 2]) {
    out.push(`<circle cx="${CX}" cy="${CY}" r="${c(R_REF + d * scale)}" fill="none" stroke="${PALETTE.faint}" stroke-dasharray="3 3"/>`);
  }
  out.push(`<circle cx="${CX}" cy="${CY}" r="${R_CHAMBER}" fill="none" stroke="${PALETTE.grid}" stroke-width="0.8"/>`);
  // Chambers and their plumes.
  out.push('<g class="chambers">');
  for (const ch of p.chambers) {
    const [x, y] = polar(CX, CY, R_CHAMBER, ch.angleDeg, p.view);
    const [px, py] = polar(CX, CY, R_REF, ch.plumeAngleDeg, p.view);
    const dev = diffIn(u, ch.deviationC);
    const blind = ch.notObservableReason ?? null;
    const fill = dev === null ? '#ffffff' : dev < 0 ? PALETTE.cold : PALETTE.hot;
    out.push(`<line x1="${c(x)}" y1="${c(y)}" x2="${c(px)}" y2="${c(py)}" stroke="${PALETTE.plume}" stroke-width="0.8" stroke-dasharray="2 3"/>`);
    out.push(`<g class="chamber${blind ? ' not-observable' : ''}" data-chamber="${ch.number}" data-angle="${c(ch.angleDeg)}" data-plume-angle="${c(ch.plumeAngleDeg)}"${blind ? ' data-observable="false"' : ''}>`);
    out.push(`<rect x="${c(x - 15)}" y="${c(y - 11)}" width="30" height="22" rx="4" fill="${fill}" fill-opacity="${dev === null ? 1 : Math.min(0.85, 0.15 + Math.abs(dev) / 60)}" stroke="${blind ? PALETTE.invalid : PALETTE.ink}"${blind ? ' stroke-dasharray="3 2"' : ''}/>`);
    out.push(`<text x="${c(x)}" y="${c(y + 4)}" text-anchor="middle" font-weight="bold"${blind ? ` fill="${PALETTE.invalid}" font-style="italic"` : ''}>C${ch.number}${blind ? '?' : ''}</text>`);
    out.push(`<path d="M${c(px)},${c(py - 6)} l5,9 h-10 z" fill="${PALETTE.plume}" transform="rotate(${c(p.view === 'upstream' ? -ch.plumeAngleDeg : ch.plumeAngleDeg)} ${c(px)} ${c(py)})"/>`);
    out.push(
      blind
        ? `<title>chamber ${ch.number}: ${esc(blind)}; plume at ${num(ch.plumeAngleDeg, 0)}°</title></g>`
        : `<title>chamber ${ch.number}: ${num(dev)} °${u} from the average chamber; plume at ${num(ch.plumeAngleDeg, 0)}°</title></g>`,
    );
  }
  out.push('</g>');
  // Thermocouples.
  out.push('<g class="thermocouples">');
  for (const t of p.thermocouples) {
    const [lx, ly] = polar(CX, CY, R_LABEL, t.angleDeg, p.view);
    const reading = tempIn(u, t.readingC);
    if (t.valid && t.deviationC !== null) {
      const dev = diffIn(u, t.deviationC)!;
      const r = R_REF + t.deviationC * scale;
      const [x0, y0] = polar(CX, CY, R_REF, t.angleDeg, p.view);
      const [x, y] = polar(CX, CY, r, t.angleDeg, p.view);
      const colour = dev < 0 ? PALETTE.cold : PALETTE.hot;
      out.push(`<g class="thermocouple valid" data-thermocouple="${t.number}" data-angle="${c(t.angleDeg)}">`);
      out.push(`<line x1="${c(x0)}" y1="${c(y0)}" x2="${c(x)}" y2="${c(y)}" stroke="${colour}" stroke-width="4"/>`);
      out.push(dev < 0 ? `<rect x="${c(x - 4)}" y="${c(y - 4)}" width="8" height="8" fill="${colour}"/>` : `<circle cx="${c(x)}" cy="${c(y)}" r="4.5" fill="${colour}"/>`);
      out.push(`<text x="${c(lx)}" y="${c(ly + 4)}" text-anchor="middle" font-size="10">${t.number}</text>`);
      out.push(`<title>thermocouple ${t.number}: ${num(reading)} °${u} (${dev >= 0 ? '+' : ''}${num(dev)})</title></g>`);
    } else {
      const [x, y] = polar(CX, CY, R_REF, t.angleDeg, p.view);
      out.push(`<g class="thermocouple invalid" data-thermocouple="${t.number}" data-angle="${c(t.angleDeg)}" data-reason="${esc(t.reason ?? 'invalid')}">`);
      out.push(`<path d="M${c(x - 6)},${c(y - 6)} L${c(x + 6)},${c(y + 6)} M${c(x - 6)},${c(y + 6)} L${c(x + 6)},${c(y - 6)}" stroke="${PALETTE.invalid}" stroke-width="3"/>`);
      out.push(`<text x="${c(lx)}" y="${c(ly + 4)}" text-anchor="middle" font-size="10" fill="${PALETTE.invalid}" font-style="italic">${t.number}✕</text>`);
      out.push(`<title>thermocouple ${t.number}: not used (${esc(t.reason ?? 'invalid')})</title></g>`);
    }
  }
  out.push('</g>');
  // Figures and legend.
  const spread = diffIn(u, p.spreadC);
  const limit = diffIn(u, p.limitC);
  const over = spread !== null && limit !== null && spread > limit;
  const y0 = H - 62;
  out.push(`<text x="20" y="${y0}" font-size="14" class="spread" font-weight="${over ? 'bold' : 'normal'}">exhaust spread ${num(spread)} °${u}${limit !== null ? ` · limit ${num(limit)} °${u}${over ? ` · ${ABOVE_LIMIT}` : ''}` : ''}</text>`);
  out.push(`<text x="20" y="${y0 + 18}">corrected load ${p.loadFraction === null ? '–' : Math.round(p.loadFraction * 100) + ' %'} · swirl ${num(p.swirlDeg, 0)}° · scale: circle = ring centre, dashed = ±${num(diffIn(u, maxDev / 2), 0)} °${u}</text>`);
  out.push(`<circle cx="26" cy="${y0 + 34}" r="4.5" fill="${PALETTE.hot}"/><text x="36" y="${y0 + 38}">hotter</text>`);
  out.push(`<rect x="92" y="${y0 + 30}" width="8" height="8" fill="${PALETTE.cold}"/><text x="106" y="${y0 + 38}">colder</text>`);
  out.push(`<path d="M170,${y0 + 30} l8,8 M170,${y0 + 38} l8,-8" stroke="${PALETTE.invalid}" stroke-width="2.5"/><text x="184" y="${y0 + 38}">not used (invalid)</text>`);
  out.push(`<path d="M310,${y0 + 29} l5,9 h-10 z" fill="${PALETTE.plume}"/><text x="320" y="${y0 + 38}">chamber plume after swirl</text>`);
  if (p.chambers.some((ch) => ch.notObservableReason)) out.push(`<text x="20" y="${y0 + 56}" fill="${PALETTE.invalid}" font-style="italic" class="not-observable">C?: not observable, no valid thermocouple under its plume</text>`);
  out.push('</svg>');
  return out.join('');
}
