/**
 * services/sim: the demo fleet and test-data generator. A physical model of chambers → swirl →
 * exhaust ring, with operation (dispatch, starts, stops, trips) and faults, and the ground truth
 * of every generated data set. Deterministic by seed.
 */
export * from './types.ts';
export { simulateUnit, simulateFleet, UnitSimulation, truePlumeAngleDeg, resolvePhysics, plumeKernel, toMs, isoTime, type GenerateOptions } from './generator.ts';
export { demoFleet, demoFleetConfigs, DEMO_SITES, DEFAULT_DEMO_END } from './fleet.ts';
export { ambientC, ambientKPa, type SiteClimate } from './ambient.ts';
export { UCI_EXHAUST_FIT, ringMeanC, baseLoadFraction, fitUciExhaustResponse, parseUciCsv } from './exhaust-model.ts';
export { START_VALUES } from './operation.ts';
export { buildScenario, scenarioNames, SCENARIOS, type Scenario, type ScenarioOptions } from './scenarios.ts';
export { mergeByTime } from './merge.ts';
