/** The scorecard's floors with the fleet fed live, day by day (see floors.ts). */
import { floorsSuite } from './floors.ts';

floorsSuite('live');
