/**
 * Shapes shared by every part of Cansight. A unit's configuration has the same shape here, in
 * the HTTP API and in the database (units_config.config), so nothing translates between them.
 * Chambers and thermocouples are numbered from 1 wherever a person reads them; arrays inside
 * core/ are indexed from 0.
 */

/** Corrected load fraction and swirl angle in degrees: one point of a swirl curve. */
export type SwirlPoint = [loadFraction: number, swirlDeg: number];

export interface UnitConfig {
  /** Generator output at ISO 3977-2 standard-day conditions, MW. */
  ratedPowerMw: number;
  /** Exhaust thermocouples: evenly spaced from firstAngleDeg, or at explicit angles. */
  thermocouples: { count: number; firstAngleDeg?: number; anglesDeg?: number[] };
  /** Combustion chambers, evenly spaced from firstAngleDeg. */
  chambers: { count: number; firstAngleDeg: number };
  /** Swirl between chamber exit and thermocouple plane, as a function of corrected load. */
  swirl: { sense: 1 | -1; curve: SwirlPoint[]; startupDeg?: number };
  /** How people see temperatures for this unit. Storage is always °C. */
  temperatureUnit: 'C' | 'F';
  /** Which way the angles are read: standing behind the exhaust looking upstream, or looking downstream. */
  view?: 'downstream' | 'upstream';
  /** Exponents of the corrected-power group P / (δ^a · θ^b); a = 1, b = 0.5 by default. */
  correction?: { deltaExponent: number; thetaExponent: number };
  /** Combustion modes by the code sent with the rings, each with its own settings. */
  modes?: Record<string, { spreadLimitC?: number }>;
}

/** Plume kernel shape used to map the ring to chambers. */
export type PlumeKernel = 'von-mises' | 'wrapped-gaussian';

/**
 * Why a reading was not used. Codes are stored per thermocouple in a Uint8Array on the hot
 * path; `VALIDITY_REASONS[code]` gives the name used in payloads.
 */
export const VALIDITY = {
  valid: 0,
  missing: 1,
  out_of_range: 2,
  isolated_outlier: 3,
  frozen: 4,
  erratic: 5,
  drifting_alone: 6,
} as const;

export type ValidityReason = keyof typeof VALIDITY;
export type ValidityCode = (typeof VALIDITY)[ValidityReason];

/** Reason name for each validity code, index = code. */
export const VALIDITY_REASONS: readonly ValidityReason[] = [
  'valid',
  'missing',
  'out_of_range',
  'isolated_outlier',
  'frozen',
  'erratic',
  'drifting_alone',
];

/** A reading as it may arrive: a number, or nothing. */
export type Reading = number | null | undefined;
