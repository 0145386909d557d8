/**
 * A configuration family compared side by side: units of one design (same chamber count), each
 * with its chamber residuals, drift rates and spread at one corrected load. For every chamber
 * position the units are ranked coldest first, and the unit whose chamber stands furthest
 * below the family at its position is named with how far (°C, and in robust σ of the family at
 * that position). Plain numbers in, plain rankings out.
 */
import { MAD_TO_SIGMA, mad, median } from './stats.ts';

export interface FamilyMember {
  unitId: string;
  /** Per chamber (index 0 = chamber 1): residual against the unit's own baseline, °C; null: none. */
  residualsC: ReadonlyArray<number | null>;
  /** Per chamber: drift rate, °C per 30 days; null: none. */
  driftCPer30d: ReadonlyArray<number | null>;
  /** Spread at the family's reference load, °C; null: no steady ring there. */
  spreadC: number | null;
}

export interface ChamberStanding {
  unitId: string;
  residualC: number | null;
  /** 1 = coldest of the family at this chamber position; null without a residual. */
  rank: number | null;
  /** Residual minus the family median at this position, °C. */
  belowFamilyC: number | null;
}

export interface ChamberPosition {
  chamber: number;
  familyMedianC: number | null;
  /** Robust σ of the family's residuals at this position (MAD × 1.4826), °C. */
  familySigmaC: number | null;
  ranking: ChamberStanding[];
}

export interface UnitStanding {
  unitId: string;
  /** Order of the comparison: 1 = the unit with the coldest chamber against its family. */
  rank: number;
  coldestChamber: number | null;
  coldestResidualC: number | null;
  /** Rank of that chamber among the family's units at the same position. */
  coldestRankAtPosition: number | null;
  /** How far that chamber stands below the family median at its position, in family σ. */
  coldestZ: number | null;
  /** 1 = widest spread at the reference load. */
  spreadRank: number | null;
  fastestCoolingChamber: number | null;
  fastestCoolingCPer30d: number | null;
}

const finite = (v: number | null | undefined): v is number => v !== null && v !== undefined && Number.isFinite(v);

/** Ranks 1… of the finite values in ascending (or descending) order; null for the rest. Ties share the lower rank. */
function ranks(values: ReadonlyArray<number | null>, descending = false): Array<number | null> {
  const xs = values.filter(finite);
  return values.map((v) => (finite(v) ? 1 + xs.filter((x) => (descending ? x > v : x < v)).length : null));
}

/** A σ floor, °C, so that a family of identical readings does not make every difference infinite. */
const SIGMA_FLOOR_C = 0.5;

export function compareFamily(members: readonly FamilyMember[], chambers: number): { positions: ChamberPosition[]; units: UnitStanding[] } {
  const positions: ChamberPosition[] = Array.from({ length: chambers }, (_, k) => {
    const values = members.map((m) => (finite(m.residualsC[k]) ? (m.residualsC[k] as number) : null));
    const present = values.filter(finite);
    const med = present.length ? median(present) : null;
    const sigma = present.length >= 3 ? Math.max(SIGMA_FLOOR_C, mad(present) * MAD_TO_SIGMA) : null;
    const r = ranks(values);
    return {
      chamber: k + 1,
      familyMedianC: med,
      familySigmaC: sigma,
      ranking: members
        .map((m, i) => ({ unitId: m.unitId, residualC: values[i], rank: r[i], belowFamilyC: values[i] !== null && med !== null ? (values[i] as number) - med : null }))
        .sort((a, b) => (a.rank ?? Infinity) - (b.rank ?? Infinity) || a.unitId.localeCompare(b.unitId)),
    };
  });
  const spreadRanks = ranks(members.map((m) => m.spreadC), true);
  const standings = members.map((m, i) => {
    let coldest: number | null = null;
    let coldestZ: number | null = null;
    // The coldest chamber against the family: furthest below the family median at its position
    // (in σ where the family is large enough to have one, else in °C).
    for (let k = 0; k < chambers; k++) {
      const p = positions[k];
      const s = p.ranking.find((x) => x.unitId === m.unitId)!;
      if (s.belowFamilyC === null) continue;
      const z = s.belowFamilyC / (p.familySigmaC ?? 1);
      if (coldestZ === null || z < coldestZ) {
        coldestZ = z;
        coldest = k;
      }
    }
    let cooling: number | null = null;
    for (let k = 0; k < chambers; k++) if (finite(m.driftCPer30d[k]) && (cooling === null || (m.driftCPer30d[k] as number) < (m.driftCPer30d[cooling] as number))) cooling = k;
    return {
      unitId: m.unitId,
      rank: 0,
      coldestChamber: coldest === null ? null : coldest + 1,
      coldestResidualC: coldest === null ? null : (m.residualsC[coldest] as number),
      coldestRankAtPosition: coldest === null ? null : positions[coldest].ranking.find((x) => x.unitId === m.unitId)!.rank,
      coldestZ: coldest === null || positions[coldest].familySigmaC === null ? null : coldestZ,
      spreadRank: spreadRanks[i],
      fastestCoolingChamber: cooling === null ? null : cooling + 1,
      fastestCoolingCPer30d: cooling === null ? null : (m.driftCPer30d[cooling] as number),
      order: coldestZ ?? Infinity,
    };
  });
  standings.sort((a, b) => a.order - b.order || a.unitId.localeCompare(b.unitId));
  return { positions, units: standings.map(({ order: _order, ...s }, i) => ({ ...s, rank: i + 1 })) };
}
