/**
 * The simulated unit's ring mean (exhaust temperature) and its sensitivity to a chamber's heat
 * release, as functions of load fraction and ambient conditions. The magnitudes above about 60 %
 * load come from a real unit's hourly records (see UCI_EXHAUST_FIT); below that the data say
 * nothing and the values are from memory, marked as such. Pure functions; no I/O.
 */

/**
 * Coefficients derived once from the UCI Machine Learning Repository "Gas Turbine CO and NOx
 * Emission Data Set" (Kaya, Tüfekci, Uzun, Turkish J. of Electrical Engineering & Computer
 * Sciences 27 (2019) 4783–4796; CC BY 4.0), test/reference/uci-gas-turbine-co-nox-2011-2015.csv,
 * 36,733 hourly rows, by fitUciExhaustResponse() below (ordinary least squares); the test
 * test/sim/exhaust-model.test.ts re-derives them from the CSV and checks they agree.
 *
 * What the data say: that unit runs under exhaust temperature control at part load (TAT held
 * flat near 550 °C while the inlet guide vanes close) and under its firing temperature limit at
 * base load (TIT ≈ 1100 °C), where TAT falls as more air goes through on a cold day. So one
 * straight line through all rows would be wrong; the rows are split by regime on TIT:
 * - base load (TIT ≥ 1099.5 °C, within 1.5 °C of the data's maximum): base power and base TAT
 *   against ambient temperature and pressure;
 * - part load (TIT < 1090 °C): TAT against load fraction and ambient temperature (the plateau);
 * - between (1090 ≤ TIT < 1099.5 °C): the slope of TAT against load at fixed ambient as the
 *   unit leaves the plateau towards its base-load point.
 * Load fraction = TEY / (base power at 15 °C and 1013.25 mbar), so the slopes carry over to a
 * unit of any size.
 */
export const UCI_EXHAUST_FIT = {
  /** Base-load power at 15 °C, 1013.25 mbar, MW (the dataset unit's "ISO" rating). */
  isoBasePowerMw: 156.90,
  /** Change of base-load power per °C of ambient, as a fraction of isoBasePowerMw. */
  basePowerPerC: -0.004534,
  /** Change of base-load power per mbar of ambient pressure, as a fraction of isoBasePowerMw. */
  basePowerPerMbar: 0.0004569,
  /** Base-load TAT at 15 °C and 1013.25 mbar, °C. */
  baseTatC: 534.80,
  /** d TAT / d ambient temperature at base load, °C per °C. */
  baseTatPerC: 0.6050,
  /** d TAT / d ambient pressure at base load, °C per mbar. */
  baseTatPerMbar: -0.1216,
  /** Part-load plateau TAT at load fraction 0.8 and 15 °C, °C. */
  partTatC: 549.20,
  /** d TAT / d load fraction on the plateau, °C per unit load fraction. */
  partTatPerLoad: 12.48,
  /** d TAT / d ambient temperature on the plateau, °C per °C. */
  partTatPerC: 0.1221,
  /** d TAT / d load fraction at fixed ambient between plateau and base load, °C per unit load fraction. */
  transitionTatPerLoad: -94.96,
  /** Lowest load fraction in the data (the plateau is known down to here). */
  minLoadFraction: 0.6375,
} as const;

export type UciExhaustFit = { -readonly [K in keyof typeof UCI_EXHAUST_FIT]: number };

/** Columns of the UCI file that the fit uses. */
export interface UciColumns {
  atC: Float64Array;
  apMbar: Float64Array;
  titC: Float64Array;
  tatC: Float64Array;
  teyMw: Float64Array;
}

/** Parses the UCI CSV text (header AT,AP,AH,AFDP,GTEP,TIT,TAT,TEY,CDP,CO,NOX). */
export function parseUciCsv(text: string): UciColumns {
  const lines = text.split(/\r?\n/).filter((l) => l.trim().length > 0);
  const header = lines[0].split(',').map((h) => h.trim());
  const col = (name: string): number => {
    const i = header.indexOf(name);
    if (i < 0) throw new Error(`UCI CSV: column ${name} not found in header "${lines[0]}"`);
    return i;
  };
  const iAt = col('AT'), iAp = col('AP'), iTit = col('TIT'), iTat = col('TAT'), iTey = col('TEY');
  const n = lines.length - 1;
  const out: UciColumns = {
    atC: new Float64Array(n), apMbar: new Float64Array(n), titC: new Float64Array(n),
    tatC: new Float64Array(n), teyMw: new Float64Array(n),
  };
  for (let r = 0; r < n; r++) {
    const f = lines[r + 1].split(',');
    out.atC[r] = Number(f[iAt]);
    out.apMbar[r] = Number(f[iAp]);
    out.titC[r] = Number(f[iTit]);
    out.tatC[r] = Number(f[iTat]);
    out.teyMw[r] = Number(f[iTey]);
  }
  return out;
}

/**
 * Ordinary least squares y ≈ X·β by the normal equations with partial pivoting (p is 2 or 3
 * here). rows: each row's regressors, the first normally 1 for the intercept.
 */
export function leastSquares(rows: readonly number[][], y: readonly number[]): number[] {
  const p = rows[0].length;
  const a = Array.from({ length: p }, () => new Array<number>(p + 1).fill(0));
  for (let r = 0; r < rows.length; r++) {
    const x = rows[r];
    for (let i = 0; i < p; i++) {
      for (let j = 0; j < p; j++) a[i][j] += x[i] * x[j];
      a[i][p] += x[i] * y[r];
    }
  }
  for (let c = 0; c < p; c++) {
    let piv = c;
    for (let r = c + 1; r < p; r++) if (Math.abs(a[r][c]) > Math.abs(a[piv][c])) piv = r;
    [a[c], a[piv]] = [a[piv], a[c]];
    if (a[c][c] === 0) throw new Error('leastSquares: regressors are collinear');
    for (let r = 0; r < p; r++) {
      if (r === c) continue;
      const f = a[r][c] / a[c][c];
      for (let k = c; k <= p; k++) a[r][k] -= f * a[c][k];
    }
  }
  return a.map((row, i) => row[p] / row[i]);
}

/** TIT thresholds (°C) that split the UCI rows into regimes; see UCI_EXHAUST_FIT. */
export const UCI_BASE_TIT_MIN_C = 1099.5;
export const UCI_PART_TIT_MAX_C = 1090;

/** The regression behind UCI_EXHAUST_FIT, run on the UCI columns. */
export function fitUciExhaustResponse(d: UciColumns): UciExhaustFit {
  const n = d.atC.length;
  const base: number[] = [], part: number[] = [], trans: number[] = [];
  for (let r = 0; r < n; r++) {
    if (d.titC[r] >= UCI_BASE_TIT_MIN_C) base.push(r);
    else if (d.titC[r] < UCI_PART_TIT_MAX_C) part.push(r);
    else trans.push(r);
  }
  const ambX = (r: number) => [1, d.atC[r] - 15, d.apMbar[r] - 1013.25];
  const bp = leastSquares(base.map(ambX), base.map((r) => d.teyMw[r]));
  const iso = bp[0];
  const bt = leastSquares(base.map(ambX), base.map((r) => d.tatC[r]));
  const load = (r: number) => d.teyMw[r] / iso;
  const pt = leastSquares(part.map((r) => [1, load(r) - 0.8, d.atC[r] - 15]), part.map((r) => d.tatC[r]));
  const tt = leastSquares(trans.map((r) => [1, load(r), d.atC[r] - 15]), trans.map((r) => d.tatC[r]));
  let minLoad = Infinity;
  for (let r = 0; r < n; r++) minLoad = Math.min(minLoad, load(r));
  return {
    isoBasePowerMw: iso,
    basePowerPerC: bp[1] / iso,
    basePowerPerMbar: bp[2] / iso,
    baseTatC: bt[0],
    baseTatPerC: bt[1],
    baseTatPerMbar: bt[2],
    partTatC: pt[0],
    partTatPerLoad: pt[1],
    partTatPerC: pt[2],
    transitionTatPerLoad: tt[1],
    minLoadFraction: minLoad,
  };
}

// ---- the model used by the simulator -------------------------------------------------------

/**
 * Below this load fraction the inlet guide vanes are taken to be at their minimum and the
 * exhaust temperature falls towards its full-speed-no-load value (from memory; the UCI data
 * stop at about 64 % load and cannot say).
 */
export const IGV_MIN_LOAD_FRACTION = 0.6;
/** Ring mean at full speed no load on a 15 °C day, °C (from memory, order of magnitude). */
export const FSNL_EXHAUST_C = 330;

/**
 * Highest load fraction (of the ISO rating) the unit can make at this ambient: the UCI
 * base-load power line. Example: 15 °C, 101.325 kPa → 1.0; 30 °C → about 0.932.
 */
export function baseLoadFraction(ambientC: number, ambientKPa: number): number {
  const f = UCI_EXHAUST_FIT;
  return 1 + f.basePowerPerC * (ambientC - 15) + f.basePowerPerMbar * (ambientKPa * 10 - 1013.25);
}

/**
 * Ring mean exhaust temperature, °C, for a unit running at load fraction L (of ISO rating) with
 * generator connected: the lower of the exhaust-temperature-control plateau and the
 * firing-temperature-limited line through the base-load point (both from the UCI fit), falling
 * linearly to the no-load value below the inlet guide vane minimum. offsetC shifts a unit's
 * whole curve (machines differ).
 */
export function ringMeanC(loadFraction: number, ambientC: number, ambientKPa: number, offsetC = 0): number {
  const f = UCI_EXHAUST_FIT;
  const dT = ambientC - 15;
  const lb = baseLoadFraction(ambientC, ambientKPa);
  const baseTat = f.baseTatC + f.baseTatPerC * dT + f.baseTatPerMbar * (ambientKPa * 10 - 1013.25);
  const l = Math.min(loadFraction, lb);
  if (l >= IGV_MIN_LOAD_FRACTION) return highLoadTat(l, dT, lb, baseTat) + offsetC;
  const fsnl = FSNL_EXHAUST_C + f.partTatPerC * dT;
  const top = highLoadTat(IGV_MIN_LOAD_FRACTION, dT, lb, baseTat);
  return fsnl + (top - fsnl) * (Math.max(0, l) / IGV_MIN_LOAD_FRACTION) + offsetC;
}

/** The lower of the part-load plateau and the line through the base-load point. */
function highLoadTat(l: number, dT: number, lb: number, baseTat: number): number {
  const f = UCI_EXHAUST_FIT;
  return Math.min(f.partTatC + f.partTatPerLoad * (l - 0.8) + f.partTatPerC * dT, baseTat + f.transitionTatPerLoad * (l - lb));
}

/** Compressor pressure ratio at load fraction L: about 8 at base (common practice for an older heavy-duty unit), less with vanes closed (from memory). */
export function pressureRatio(loadFraction: number): number {
  const l = Math.max(0, Math.min(1.1, loadFraction));
  return 1 + 7 * (0.72 + 0.28 * l);
}

/**
 * Chamber-exit to exhaust absolute temperature ratio. At high load it matches the UCI TIT and
 * TAT columns (1373 K / 808 K ≈ 1.70 at base); the no-load end (1.25) is from memory.
 */
export function expansionRatio(loadFraction: number): number {
  return 1.25 + 0.45 * Math.max(0, Math.min(1.1, loadFraction));
}

/**
 * Exhaust-plane equivalent of the combustor temperature rise, °C: how much the exhaust under a
 * chamber's plume would fall if that chamber released no heat, before mixing. With compressor
 * discharge T_cd = T_amb·PR^(0.286/0.86) (polytropic efficiency 0.86, from memory) and chamber
 * exit T_exit = T_exh·r: rise at exhaust = (T_exit − T_cd)·T_exh/T_exit = T_exh − T_cd/r (kelvin).
 * Below full speed the pressure and expansion ratios fall with the square of speed (fan law,
 * a rough approximation).
 */
export function combustionRiseAtExhaustC(loadFraction: number, ambientC: number, exhaustMeanC: number, speedPct = 100): number {
  const n2 = Math.min(1, Math.max(0, speedPct / 100)) ** 2;
  const tAmbK = ambientC + 273.15;
  const pr = 1 + (pressureRatio(loadFraction) - 1) * n2;
  const r = 1 + (expansionRatio(loadFraction) - 1) * n2;
  const tCdK = tAmbK * Math.pow(pr, 0.2857 / 0.86);
  return exhaustMeanC + 273.15 - tCdK / r;
}

/**
 * Fuel flow as a fraction of base-load fuel flow at load fraction L: about a quarter at no
 * load, linear to base (common practice, no written source).
 */
export function fuelFractionAtLoad(loadFraction: number): number {
  return 0.25 + 0.75 * Math.max(0, loadFraction);
}
