/**
 * A configuration family side by side as one picture: a row per unit in the comparison's order
 * (the unit with the coldest chamber against its family first), a column per chamber holding
 * that chamber's residual (blue colder, vermillion hotter, stronger the larger), the coldest
 * unit at each chamber position outlined in a heavy frame and marked "1", and the spread at the
 * reference load with its rank at the right. Values are written in every cell, so it reads in
 * grey on paper. Pure: the comparison comes in, SVG text goes out.
 */
import { PALETTE, c, diffIn, esc, num, svgOpen } from './draw.ts';

export interface FamilyPictureUnit {
  unitId: string;
  site: string;
  rank: number;
  residualsC: ReadonlyArray<number | null>;
  spreadC: number | null;
  spreadRank: number | null;
}

export interface FamilyPicture {
  family: string;
  chambers: number;
  temperatureUnit: 'C' | 'F';
  referenceLoad: { fraction: number; bandFraction: number };
  units: FamilyPictureUnit[];
  /** Per chamber position (index 0 = chamber 1): the unit ranked coldest there. */
  coldestAt: ReadonlyArray<string | null>;
}

const CELL_W = 46;
const ROW_H = 24;
const LEFT = 170;
const TOP = 70;

function cellFill(v: number | null, scale: number): { fill: string; opacity: number } {
  if (v === null || !Number.isFinite(v)) return { fill: PALETTE.faint, opacity: 0.5 };
  return { fill: v < 0 ? PALETTE.cold : PALETTE.hot, opacity: Math.min(1, Math.abs(v) / scale) * 0.85 + 0.05 };
}

export function familySvg(p: FamilyPicture): string {
  const u = p.temperatureUnit;
  const width = LEFT + p.chambers * CELL_W + 150;
  const height = TOP + Math.max(1, p.units.length) * ROW_H + 60;
  const title = `Family ${p.family}: chamber residuals of ${p.units.length} unit${p.units.length === 1 ? '' : 's'} side by side`;
  const out: string[] = [svgOpen(width, height, title)];
  out.push(`<text x="12" y="22" font-size="15" font-weight="bold">${esc(title)}</text>`);
  out.push(`<text x="12" y="40" font-size="11">Residual against each unit's own baseline, °${u}; blue colder, vermillion hotter. Heavy frame and "1": the coldest unit at that chamber. Spread at ${Math.round(p.referenceLoad.fraction * 100)} ± ${Math.round(p.referenceLoad.bandFraction * 100)} % corrected load.</text>`);
  const all = p.units.flatMap((x) => x.residualsC).filter((v): v is number => v !== null && Number.isFinite(v));
  const scale = Math.max(2, ...all.map(Math.abs));
  for (let k = 0; k < p.chambers; k++) {
    out.push(`<text x="${c(LEFT + k * CELL_W + CELL_W / 2)}" y="${TOP - 8}" text-anchor="middle" font-size="11">ch ${k + 1}</text>`);
  }
  out.push(`<text x="${c(LEFT + p.chambers * CELL_W + 12)}" y="${TOP - 8}" font-size="11">spread (rank)</text>`);
  if (p.units.length === 0) out.push(`<text x="12" y="${TOP + 16}" font-style="italic">No unit of this family in reach.</text>`);
  p.units.forEach((row, i) => {
    const y = TOP + i * ROW_H;
    out.push(`<text x="12" y="${c(y + 16)}" font-size="11">${row.rank}. ${esc(row.unitId)}</text><text x="${LEFT - 8}" y="${c(y + 16)}" text-anchor="end" font-size="9" fill="#444">${esc(row.site.slice(0, 18))}</text>`);
    for (let k = 0; k < p.chambers; k++) {
      const v = row.residualsC[k] ?? null;
      const f = cellFill(v, scale);
      const x = LEFT + k * CELL_W;
      const coldest = p.coldestAt[k] === row.unitId;
      out.push(`<rect x="${c(x + 1)}" y="${c(y + 1)}" width="${CELL_W - 2}" height="${ROW_H - 2}" fill="${f.fill}" fill-opacity="${c(f.opacity)}" stroke="${PALETTE.ink}" stroke-width="${coldest ? 2.5 : 0.4}"${coldest ? ' data-coldest="true"' : ''}/>`);
      out.push(`<text x="${c(x + CELL_W / 2)}" y="${c(y + 16)}" text-anchor="middle" font-size="10">${num(diffIn(u, v), 1)}${coldest ? ' ¹' : ''}</text>`);
    }
    const sx = LEFT + p.chambers * CELL_W + 12;
    out.push(`<text x="${c(sx)}" y="${c(y + 16)}" font-size="11">${num(diffIn(u, row.spreadC), 1)} °${u}${row.spreadRank !== null ? ` (${row.spreadRank})` : ''}</text>`);
  });
  out.push(`<text x="12" y="${height - 14}" font-size="10" fill="#444">Cansight advises; it does not protect. Rank 1: the unit whose coldest chamber stands furthest below the family at its position.</text>`);
  out.push('</svg>');
  return out.join('');
}
