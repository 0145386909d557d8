/**
 * The simulator's replaced probe (fault kind tc_replaced): from its time on, that probe reads
 * offsetC off what the old one would have read; nothing else changes (same seed, same rings).
 */
import { describe, expect, it } from 'vitest';
import { demoFleet } from '../../services/sim/fleet.ts';
import { simulateUnit } from '../../services/sim/generator.ts';

describe('a replaced probe in the simulator', () => {
  it('reads offsetC higher from the replacement on, and every other reading is unchanged', () => {
    const mr2 = demoFleet('2026-03-01T00:00:00Z').find((u) => u.config.id === 'mr-2')!;
    const f = mr2.faults!.find((x) => x.kind === 'tc_replaced')!;
    expect(f).toMatchObject({ thermocouple: 5, offsetC: 3 });
    const window = { from: '2026-02-22T12:00:00Z', to: '2026-02-23T12:00:00Z', seed: 3 };
    const a = simulateUnit(mr2, window).batch();
    const b = simulateUnit({ ...mr2, faults: [] }, window).batch();
    const at = Date.parse(f.at as string);
    const m = a.thermocoupleCount;
    let after = 0;
    for (let j = 0; j < a.count; j++) {
      for (let i = 0; i < m; i++) {
        const d = a.exhaustC[j * m + i] - b.exhaustC[j * m + i];
        expect(d).toBeCloseTo(i === 4 && a.tsMs[j] >= at ? 3 : 0, 6);
      }
      if (a.tsMs[j] >= at) after++;
    }
    expect(after).toBeGreaterThan(0);
    expect(after).toBeLessThan(a.count);
  });
});
