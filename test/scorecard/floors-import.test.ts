/** The scorecard's floors with each unit's history sent as one import, no drift run called (see floors.ts). */
import { floorsSuite } from './floors.ts';

floorsSuite('import');
