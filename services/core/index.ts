/**
 * Cansight core: pure analytics of the exhaust-temperature ring. No I/O, no clock, no database.
 * Everything the worker, the API, the simulator and the tests use is exported from here.
 */
export * from './types.ts';
export * from './unit-config.ts';
export * from './geometry.ts';
export * from './swirl.ts';
export * from './temperature.ts';
export * from './stats.ts';
export * from './linalg.ts';
export * from './regression.ts';
export * from './correction.ts';
export * from './validity.ts';
export * from './spread.ts';
export * from './chambers.ts';
export * from './ring.ts';
export * from './baseline.ts';
export * from './drift.ts';
export * from './calibration.ts';
export * from './worst-chamber.ts';
export * from './findings.ts';
export * from './evaluate-findings.ts';
export * from './starts.ts';
export * from './start-detector.ts';
export * from './start-counters.ts';
export * from './judgement.ts';
