/**
 * Temperature units: °F ↔ °C, kelvin, and Type K thermocouple EMF ↔ °C by the NIST ITS-90
 * reference functions (NIST Monograph 175), with cold-junction compensation.
 * Storage is always °C; kelvin is used inside formulas.
 */

export const KELVIN_OFFSET = 273.15;

/** °F → °C: (F − 32) · 5/9. Example: 1000 °F → 537.78 °C. */
export function fahrenheitToCelsius(degF: number): number {
  return ((degF - 32) * 5) / 9;
}

/** °C → °F: C · 9/5 + 32. */
export function celsiusToFahrenheit(degC: number): number {
  return (degC * 9) / 5 + 32;
}

export function celsiusToKelvin(degC: number): number {
  return degC + KELVIN_OFFSET;
}

// NIST ITS-90 Type K reference function, 0 °C to 1372 °C (coefficients of NIST Monograph 175):
// E = Σ cᵢ tⁱ + a0·exp(a1·(t − a2)²), mV.
const K_POS_C = [
  -1.76004136860e-2, 3.8921204975e-2, 1.8558770032e-5, -9.9457592874e-8, 3.1840945719e-10,
  -5.6072844889e-13, 5.6075059059e-16, -3.2020720003e-19, 9.7151147152e-23, -1.2104721275e-26,
];
const K_A = [0.1185976, -1.183432e-4, 126.9686];
// −270 °C to 0 °C (NIST Monograph 175; coefficients from memory, checked in the tests for
// continuity with the 0–1372 °C function at 0 °C and for the inverse round trip).
const K_NEG_C = [
  0, 3.9450128025e-2, 2.3622373598e-5, -3.2858906784e-7, -4.9904828777e-9, -6.7509059173e-11,
  -5.7410327428e-13, -3.1088872894e-15, -1.0451609365e-17, -1.9889266878e-20, -1.6322697486e-23,
];
// Inverse functions t = Σ dᵢ Eⁱ (NIST Monograph 175).
const K_INV_NEG = [0, 2.5173462e1, -1.1662878, -1.0833638, -8.977354e-1, -3.7342377e-1, -8.6632643e-2, -1.0450598e-2, -5.1920577e-4]; // −5.891 to 0 mV, from memory
const K_INV_LOW = [0, 2.508355e1, 7.860106e-2, -2.503131e-1, 8.31527e-2, -1.228034e-2, 9.804036e-4, -4.41303e-5, 1.057734e-6, -1.052755e-8]; // 0 to 20.644 mV
const K_INV_HIGH = [-1.318058e2, 4.830222e1, -1.646031, 5.464731e-2, -9.650715e-4, 8.802193e-6, -3.11081e-8]; // 20.644 to 54.886 mV

/** Range of the Type K reference functions. */
export const TYPE_K_MIN_C = -270;
export const TYPE_K_MAX_C = 1372;
export const TYPE_K_MIN_MV = -6.458;
export const TYPE_K_MAX_MV = 54.887; // E(1372 °C) = 54.886 mV, with room for rounding

function poly(coeffs: readonly number[], x: number): number {
  let y = 0;
  for (let i = coeffs.length - 1; i >= 0; i--) y = y * x + coeffs[i];
  return y;
}

/**
 * Type K EMF in mV for a junction at t °C against a reference junction at 0 °C.
 * Example: typeKEmfMv(500) = 20.644 (NIST table). NaN outside −270…1372 °C.
 */
export function typeKEmfMv(degC: number): number {
  if (!(degC >= TYPE_K_MIN_C && degC <= TYPE_K_MAX_C)) return NaN;
  if (degC < 0) return poly(K_NEG_C, degC);
  const d = degC - K_A[2];
  return poly(K_POS_C, degC) + K_A[0] * Math.exp(K_A[1] * d * d);
}

/**
 * Temperature in °C for a Type K EMF in mV (reference junction at 0 °C), by the NIST inverse
 * polynomials (stated error within about −0.05/+0.06 °C above 0 °C). NaN outside the range.
 */
export function typeKTemperatureC(emfMv: number): number {
  if (!(emfMv >= -5.891 && emfMv <= TYPE_K_MAX_MV)) return NaN;
  if (emfMv < 0) return poly(K_INV_NEG, emfMv);
  if (emfMv <= 20.644) return poly(K_INV_LOW, emfMv);
  return poly(K_INV_HIGH, emfMv);
}

/**
 * Hot-junction temperature from a measured Type K EMF with the cold (reference) junction at
 * coldJunctionC: t = t⁻¹(E_measured + E(t_cj)).
 */
export function typeKCompensatedC(measuredMv: number, coldJunctionC: number): number {
  return typeKTemperatureC(measuredMv + typeKEmfMv(coldJunctionC));
}

/** The EMF a Type K pair at hotC reads against a cold junction at coldJunctionC, mV. */
export function typeKMeasuredMv(hotC: number, coldJunctionC: number): number {
  return typeKEmfMv(hotC) - typeKEmfMv(coldJunctionC);
}

/**
 * Temperatures over which IEC 60584-1 gives each Type K tolerance class, °C: class 1 from −40 to
 * 1000 °C, class 2 from −40 to 1200 °C (from memory of the standard's table).
 */
export const TYPE_K_CLASS_RANGE_C: Readonly<Record<1 | 2, readonly [number, number]>> = { 1: [-40, 1000], 2: [-40, 1200] };

/**
 * IEC 60584-1 tolerance of a Type K thermocouple, ± °C: class 1 the larger of 1.5 °C and
 * 0.004·|t|; class 2 the larger of 2.5 °C and 0.0075·|t|. Outside the class's range
 * (TYPE_K_CLASS_RANGE_C) the standard gives none, and this throws a RangeError saying so.
 */
export function typeKToleranceC(degC: number, tolClass: 1 | 2): number {
  const range = TYPE_K_CLASS_RANGE_C[tolClass];
  if (!range) throw new RangeError(`IEC 60584-1 tolerance class must be 1 or 2 for Type K, got ${String(tolClass)}`);
  if (!(degC >= range[0] && degC <= range[1])) {
    throw new RangeError(`IEC 60584-1 gives no class ${tolClass} tolerance for Type K at ${degC} °C: class ${tolClass} covers ${range[0]} to ${range[1]} °C`);
  }
  return tolClass === 1 ? Math.max(1.5, 0.004 * Math.abs(degC)) : Math.max(2.5, 0.0075 * Math.abs(degC));
}
