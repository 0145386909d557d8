/**
 * A lost flame under a narrow plume is a chamber finding. The simulator's chamber 5 loses its
 * flame for four hours on a unit with one and with two probes per chamber and true plume widths
 * of 0.3 to 0.6 of the chamber pitch (the solver assumes 0.5); the rings go through the
 * worker's ring analysis against a baseline of the two days before. The probe at the centre of
 * the plume then reads some 200 °C low while its neighbours see little of it (at 0.3 of the
 * pitch and one probe per chamber, about a tenth): neither the per-ring lone-probe test nor the
 * window tests (erratic, drifting alone) may claim it, while chamber 5 is called cold,
 * critical, from the first ring. (The simulator's truth; the analyser is told only the
 * configuration.)
 */
import { describe, expect, it } from 'vitest';
import { demoFleet } from '../../services/sim/index.ts';
import type { SimUnit } from '../../services/sim/types.ts';
import { runScenario } from './scenario.ts';

const AT = Date.parse('2026-03-03T06:00:00Z');
const END = AT + 4 * 3_600_000;

// Probe 1 at 9° (as the demo unit), or at 21.5°: then with one probe per chamber probe 6 sits on
// chamber 5's plume centre at 95 % load (0 + 4·360/11 + 70 + (0.95 − 0.6)/0.4·(52 − 70) = 185.2°
// on the demo unit's swirl curve, and 21.5 + 5·360/11 = 185.1°).
describe.each([
  [1, 9],
  [1, 21.5],
  [2, 9],
])('%s probe(s) per chamber, the first at %s°', (per, first) => {
  it.each([0.3, 0.4, 0.5, 0.6])('true plume width %s of the pitch: chamber 5 critical from the first ring, no probe called faulty', (width) => {
    const base = demoFleet()[0];
    const unit: SimUnit = {
      ...base,
      config: { ...base.config, id: `fl-${per}`, thermocouples: { count: 11 * per, firstAngleDeg: first } },
      physics: { ...base.physics, mixingWidthFrac: width },
      faults: [{ kind: 'flame_loss', chamber: 5, at: new Date(AT).toISOString(), durationH: 4 }],
    };
    const rings = runScenario(unit, { from: '2026-03-01T00:00:00Z', baselineTo: '2026-03-03T00:00:00Z', to: new Date(END + 3_600_000).toISOString() });
    const during = rings.filter((r) => r.tsMs >= AT && r.tsMs < END && r.steady);
    expect(during.length).toBeGreaterThan(200);
    for (const r of during) {
      const cold = r.findings.filter((f) => f.kind === 'chamber_cold' && f.grade === 'critical').map((f) => f.chamber);
      expect(cold, new Date(r.tsMs).toISOString()).toEqual([5]);
    }
    const tc = rings.filter((r) => r.tsMs >= AT).flatMap((r) => r.findings.filter((f) => f.kind === 'thermocouple_fault').map((f) => `${new Date(r.tsMs).toISOString().slice(11, 16)} thermocouple ${f.thermocouple} ${f.evidence.reason}`));
    expect(tc).toEqual([]);
  }, 120_000);
});
