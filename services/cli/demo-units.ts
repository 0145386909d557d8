/** Invented demo units (configuration only) registered by `cansight start` unless --no-demo. */
import type { UnitConfig } from '../core/types.ts';

export const DEMO_UNITS: Array<UnitConfig & { id: string; name: string; site: string }> = [
  {
    id: 'harbour-1', name: 'Harbour Point unit 1', site: 'Harbour Point', ratedPowerMw: 24,
    thermocouples: { count: 18, firstAngleDeg: 10 }, chambers: { count: 10, firstAngleDeg: 0 },
    swirl: { sense: 1, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] }, temperatureUnit: 'C', view: 'upstream',
  },
  {
    id: 'harbour-2', name: 'Harbour Point unit 2', site: 'Harbour Point', ratedPowerMw: 24,
    thermocouples: { count: 18, firstAngleDeg: 10 }, chambers: { count: 10, firstAngleDeg: 0 },
    swirl: { sense: 1, curve: [[0.3, 90], [0.6, 72], [1.0, 56]] }, temperatureUnit: 'C', view: 'upstream',
  },
  {
    id: 'kestrel-fen-1', name: 'Kestrel Fen unit 1', site: 'Kestrel Fen', ratedPowerMw: 41,
    thermocouples: { count: 27, firstAngleDeg: 4 }, chambers: { count: 14, firstAngleDeg: 12 },
    swirl: { sense: -1, curve: [[0.25, 70], [1.0, 38]] }, temperatureUnit: 'F', view: 'downstream',
  },
];
