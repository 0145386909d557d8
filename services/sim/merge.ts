/** Rings of several simulated units merged into one stream in time order (ties by unit order). */
import type { UnitSimulation } from './generator.ts';
import type { SimRing } from './types.ts';

export function* mergeByTime(sims: UnitSimulation[]): Generator<SimRing> {
  const its = sims.map((s) => s.rings());
  const heads: (SimRing | null)[] = its.map((it) => it.next().value ?? null);
  const keys = heads.map((h) => (h ? Date.parse(h.ts) : Infinity));
  for (;;) {
    let best = -1;
    for (let i = 0; i < heads.length; i++) if (heads[i] && (best < 0 || keys[i] < keys[best])) best = i;
    if (best < 0) return;
    yield heads[best]!;
    const nx = its[best].next();
    heads[best] = nx.done ? null : nx.value;
    keys[best] = heads[best] ? Date.parse(heads[best]!.ts) : Infinity;
  }
}
