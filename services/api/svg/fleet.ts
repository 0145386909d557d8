/**
 * The fleet overview as one picture: a tile per unit, worst first. Each tile names the unit and
 * its site, shows the exhaust spread against its limit as a bar with a limit tick, the worst
 * active alert grade by shape and word (never by colour alone), the thermocouple coverage and
 * how fresh the data is. Pure: the rows and the instant "now" come in, SVG text goes out.
 */
import { ABOVE_LIMIT, PALETTE, c, diffIn, esc, num, svgOpen } from './draw.ts';

export type Grade = 'notice' | 'warning' | 'alarm' | 'critical';
export type Freshness = 'live' | 'late' | 'silent' | 'no_data';

export interface FleetTile {
  unitId: string;
  name: string;
  site: string;
  temperatureUnit: 'C' | 'F';
  lastRingTs: string | null;
  freshness: Freshness;
  spreadC: number | null;
  spreadLimitC: number | null;
  worstGrade: Grade | null;
  activeAlerts: number;
  unacknowledged: number;
  coverage: { valid: number; total: number } | null;
}

const GRADE_ORDER: Record<Grade, number> = { notice: 1, warning: 2, alarm: 3, critical: 4 };

/** Fleet order: worst active alert first, then spread as a share of its limit, then name. */
export function rankFleet<T extends Pick<FleetTile, 'worstGrade' | 'spreadC' | 'spreadLimitC' | 'unitId' | 'freshness'>>(rows: readonly T[]): T[] {
  const ratio = (r: T) => (r.spreadC !== null && r.spreadLimitC ? r.spreadC / r.spreadLimitC : -1);
  const stale = (r: T) => (r.freshness === 'silent' ? 1 : 0);
  return [...rows].sort(
    (a, b) =>
      (b.worstGrade ? GRADE_ORDER[b.worstGrade] : 0) - (a.worstGrade ? GRADE_ORDER[a.worstGrade] : 0) ||
      stale(b) - stale(a) ||
      ratio(b) - ratio(a) ||
      a.unitId.localeCompare(b.unitId),
  );
}

/** Marker for an alert grade: notice circle, warning triangle, alarm square, critical diamond. */
export function gradeMark(grade: Grade, x: number, y: number, size = 1): string {
  const s = size;
  switch (grade) {
    case 'notice':
      return `<circle cx="${c(x)}" cy="${c(y)}" r="${c(5 * s)}" fill="${PALETTE.notice}" stroke="${PALETTE.ink}" stroke-width="0.8"/>`;
    case 'warning':
      return `<path d="M${c(x)},${c(y - 6 * s)} l${c(6 * s)},${c(11 * s)} h${c(-12 * s)} z" fill="${PALETTE.warning}" stroke="${PALETTE.ink}" stroke-width="0.8"/>`;
    case 'alarm':
      return `<rect x="${c(x - 5 * s)}" y="${c(y - 5 * s)}" width="${c(10 * s)}" height="${c(10 * s)}" fill="${PALETTE.alarm}" stroke="${PALETTE.ink}" stroke-width="0.8"/>`;
    case 'critical':
      return `<path d="M${c(x)},${c(y - 7 * s)} l${c(7 * s)},${c(7 * s)} l${c(-7 * s)},${c(7 * s)} l${c(-7 * s)},${c(-7 * s)} z" fill="${PALETTE.critical}" stroke="${PALETTE.ink}" stroke-width="0.8"/>`;
  }
}

/** "4 min ago", "3 h ago", "2 d ago" from two instants. */
export function ago(tsIso: string | null, nowMs: number): string {
  if (!tsIso) return 'no data yet';
  const s = Math.max(0, Math.round((nowMs - Date.parse(tsIso)) / 1000));
  if (s < 90) return `${s} s ago`;
  if (s < 90 * 60) return `${Math.round(s / 60)} min ago`;
  if (s < 36 * 3600) return `${Math.round(s / 3600)} h ago`;
  return `${Math.round(s / 86400)} d ago`;
}

const FRESHNESS_WORDS: Record<Freshness, string> = { live: 'data live', late: 'data late', silent: 'no data: unit silent', no_data: 'no data yet' };

const COLS = 3;
const TW = 300;
const TH = 128;
const GAP = 14;
const TOP = 74;
const LEFT = 16;

export function fleetSvg(rows: readonly FleetTile[], nowMs: number, title = 'Fleet overview'): string {
  const ranked = rankFleet(rows);
  const nRows = Math.max(1, Math.ceil(ranked.length / COLS));
  const W = LEFT * 2 + COLS * TW + (COLS - 1) * GAP;
  const H = TOP + nRows * (TH + GAP) + 46;
  const out: string[] = [svgOpen(W, H, title)];
  out.push(`<text x="${LEFT}" y="24" font-size="16" font-weight="bold">${esc(title)}</text>`);
  out.push(`<text x="${LEFT}" y="44">${ranked.length} unit${ranked.length === 1 ? '' : 's'}, worst first · as of ${esc(new Date(nowMs).toISOString().slice(0, 16).replace('T', ' '))} UTC</text>`);
  // Legend of grades.
  let lx = LEFT;
  for (const g of ['notice', 'warning', 'alarm', 'critical'] as Grade[]) {
    out.push(gradeMark(g, lx + 6, 60));
    out.push(`<text x="${lx + 16}" y="64">${g}</text>`);
    lx += 86;
  }
  out.push(`<text x="${lx + 10}" y="64" fill="${PALETTE.ink}">bar: exhaust spread, tick: its limit</text>`);
  if (ranked.length === 0) out.push(`<text x="${LEFT}" y="${TOP + 30}">No units are registered, or none is in this key's scope.</text>`);
  ranked.forEach((r, i) => {
    const x = LEFT + (i % COLS) * (TW + GAP);
    const y = TOP + Math.floor(i / COLS) * (TH + GAP);
    out.push(tile(r, x, y, nowMs));
  });
  out.push(`<text x="${LEFT}" y="${H - 16}" font-size="10">Cansight advises; it does not protect. The turbine's own protection, the manufacturer's limits and the site's procedures govern.</text>`);
  out.push('</svg>');
  return out.join('');
}

function tile(r: FleetTile, x: number, y: number, nowMs: number): string {
  const u = r.temperatureUnit;
  const out: string[] = [];
  const heavy = r.worstGrade === 'alarm' || r.worstGrade === 'critical';
  out.push(`<g class="unit-tile" data-unit="${esc(r.unitId)}" data-grade="${r.worstGrade ?? 'none'}" data-freshness="${r.freshness}">`);
  out.push(`<rect x="${x}" y="${y}" width="${TW}" height="${TH}" rx="6" fill="#ffffff" stroke="${PALETTE.ink}" stroke-width="${heavy ? 2.4 : 0.9}"${r.freshness === 'silent' ? ' stroke-dasharray="6 4"' : ''}/>`);
  out.push(`<text x="${x + 12}" y="${y + 22}" font-size="14" font-weight="bold">${esc(r.unitId)}</text>`);
  out.push(`<text x="${x + 12}" y="${y + 38}" font-size="11">${esc(truncate(r.name, 44))}</text>`);
  // Worst grade.
  if (r.worstGrade) {
    out.push(gradeMark(r.worstGrade, x + TW - 92, y + 18, 1.1));
    out.push(`<text x="${x + TW - 80}" y="${y + 22}" font-weight="bold" class="grade">${r.worstGrade}</text>`);
    out.push(`<text x="${x + TW - 12}" y="${y + 38}" font-size="11" text-anchor="end">${r.activeAlerts} active, ${r.unacknowledged} not acknowledged</text>`);
  } else {
    out.push(`<text x="${x + TW - 12}" y="${y + 22}" text-anchor="end" class="grade">no active alert</text>`);
  }
  // Spread bar.
  const bx = x + 12;
  const by = y + 58;
  const bw = TW - 24;
  const spread = diffIn(u, r.spreadC);
  const limit = diffIn(u, r.spreadLimitC);
  const full = Math.max(limit !== null ? limit * 1.5 : 0, spread !== null ? spread * 1.05 : 0, u === 'F' ? 90 : 50);
  out.push(`<rect x="${bx}" y="${by}" width="${bw}" height="14" fill="${PALETTE.faint}" fill-opacity="0.5" stroke="${PALETTE.grid}" stroke-width="0.6"/>`);
  if (spread !== null) {
    const over = limit !== null && spread > limit;
    out.push(`<rect class="spread-bar" x="${bx}" y="${by + 2}" width="${c((Math.max(0, spread) / full) * bw)}" height="10" fill="${over ? PALETTE.hot : PALETTE.cold}"${over ? ` stroke="${PALETTE.ink}" stroke-width="1"` : ''}/>`);
  }
  if (limit !== null) {
    const lxp = bx + (limit / full) * bw;
    out.push(`<path class="spread-limit" d="M${c(lxp)},${by - 4} v22" stroke="${PALETTE.ink}" stroke-width="2"/>`);
  }
  const over = spread !== null && limit !== null && spread > limit;
  out.push(`<text x="${bx}" y="${by + 30}" font-size="11"${over ? ' font-weight="bold"' : ''}>exhaust spread ${num(spread)} °${u}${limit !== null ? ` / limit ${num(limit)} °${u}` : ''}${over ? ` · ${ABOVE_LIMIT}` : ''}</text>`);
  const cov = r.coverage ? `${r.coverage.valid}/${r.coverage.total} thermocouples valid` : 'coverage –';
  out.push(`<text x="${bx}" y="${by + 48}" font-size="11">${cov} · ${FRESHNESS_WORDS[r.freshness]}, ${esc(ago(r.lastRingTs, nowMs))}</text>`);
  out.push(`<title>${esc(r.name)} (${esc(r.site)})</title>`);
  out.push('</g>');
  return out.join('');
}

function truncate(s: string, n: number): string {
  return s.length <= n ? s : s.slice(0, n - 1) + '…';
}
