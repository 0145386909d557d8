/**
 * Ambient temperature and pressure at a simulated site: a seasonal cycle, a daily cycle in local
 * time, and weather as smooth noise, all pure functions of absolute time so any window agrees
 * with any other. Units at one site share the same weather.
 */
import { combineKeys, hashString, Stream } from './rng.ts';

export interface SiteClimate {
  /** Site name as people read it; also the key of its weather. */
  name: string;
  /** Offset of local time from UTC, hours (daily cycles and dispatch follow local time). */
  utcOffsetH: number;
  /** Annual mean air temperature, °C. */
  meanC: number;
  /** Half the difference between the warmest and coldest month means, °C. */
  seasonalAmpC: number;
  /** Half the typical day–night difference, °C. */
  dailyAmpC: number;
  /** Day of year of the warmest weather (about 200 in the northern hemisphere). */
  warmestDayOfYear: number;
  /** Standard deviation of weather departures from the cycles, °C. */
  weatherSigmaC: number;
  /** Site elevation, m (sets the mean pressure). */
  elevationM: number;
}

const HOUR_MS = 3_600_000;
const DAY_MS = 86_400_000;
const YEAR_DAYS = 365.2425;

const scratch = new Stream();

/** Last knot pair per noise key: consecutive rings fall between the same knots. */
const knotCache = new Map<number, { i: number; a: number; b: number }>();

/** Smooth value noise: hashed unit-variance values at knots every knotMs, eased in between. */
export function valueNoise(key: number, tMs: number, knotMs: number): number {
  const x = tMs / knotMs;
  const i = Math.floor(x);
  const f = x - i;
  let c = knotCache.get(key);
  if (!c) {
    c = { i: NaN, a: 0, b: 0 };
    knotCache.set(key, c);
  }
  if (c.i !== i) {
    c.i = i;
    c.a = scratch.reseed(combineKeys(key, i)).bounded();
    c.b = scratch.reseed(combineKeys(key, i + 1)).bounded();
  }
  const s = f * f * (3 - 2 * f);
  return c.a + (c.b - c.a) * s;
}

const siteKeys = new Map<string, number>();
function siteKey(name: string): number {
  let k = siteKeys.get(name);
  if (k === undefined) { k = hashString(name); siteKeys.set(name, k); }
  return k;
}

/** Mean pressure at an elevation by the standard-atmosphere barometric formula, kPa. */
export function standardPressureKPa(elevationM: number): number {
  if (elevationM !== lastElevation) {
    lastElevation = elevationM;
    lastPressure = 101.325 * Math.pow(1 - 2.25577e-5 * elevationM, 5.25588);
  }
  return lastPressure;
}
let lastElevation = NaN;
let lastPressure = NaN;

/** Local hour of day (0–24) at a site. */
export function localHourOfDay(site: Pick<SiteClimate, 'utcOffsetH'>, tMs: number): number {
  const local = tMs + site.utcOffsetH * HOUR_MS;
  return (((local % DAY_MS) + DAY_MS) % DAY_MS) / HOUR_MS;
}

/** Ambient temperature, °C, at a site and time (ms since 1970 UTC). */
export function ambientC(site: SiteClimate, tMs: number): number {
  const key = siteKey(site.name);
  const dayOfYear = ((tMs / DAY_MS) % YEAR_DAYS + YEAR_DAYS) % YEAR_DAYS;
  const seasonal = site.seasonalAmpC * Math.cos((2 * Math.PI * (dayOfYear - site.warmestDayOfYear)) / YEAR_DAYS);
  const hour = localHourOfDay(site, tMs);
  // Warmest about 15:00 local; cloudy days (weather noise) have a smaller daily swing.
  const cloud = 0.6 + 0.4 * (0.5 + 0.25 * valueNoise(key ^ 0xc10d, tMs, DAY_MS));
  const daily = site.dailyAmpC * cloud * Math.cos((2 * Math.PI * (hour - 15)) / 24);
  const weather = site.weatherSigmaC * (0.8 * valueNoise(key, tMs, 3 * DAY_MS) + 0.45 * valueNoise(key ^ 0xbeef, tMs, 6 * HOUR_MS));
  return site.meanC + seasonal + daily + weather;
}

/** Ambient pressure, kPa: the site's mean plus passing weather systems of about ±1 kPa. */
export function ambientKPa(site: SiteClimate, tMs: number): number {
  const key = siteKey(site.name) ^ 0x9a7e;
  return standardPressureKPa(site.elevationM) + 0.7 * valueNoise(key, tMs, 2.5 * DAY_MS);
}
