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
}
