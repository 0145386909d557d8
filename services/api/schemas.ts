/**
 * Request and response schemas shared by the API's routes (TypeBox); the error envelope every
 * route set shares is in services/http/schemas.ts. The OpenAPI document is generated from
 * these; never describe a payload anywhere else.
 */
import { Type, type Static } from 'typebox';

export const UnitId = Type.String({ pattern: '^[a-z0-9-]{1,40}$', description: 'lower-case letters, digits and dashes, 1–40' });

/** A configuration family name. */
export const Family = Type.String({ pattern: '^[a-z0-9-]{1,40}$', description: 'configuration family: units of one design (same chamber and thermocouple count) that are compared side by side (GET /v1/fleet/families/{family}); lower-case letters, digits and dashes, 1–40' });

const Angle = Type.Number({ minimum: 0, exclusiveMaximum: 360, description: 'degrees, 0 ≤ angle < 360' });

export const UnitConfigFields = {
  ratedPowerMw: Type.Number({ exclusiveMinimum: 0, maximum: 2000, description: 'generator output at ISO standard-day conditions, MW' }),
  thermocouples: Type.Object(
    {
      count: Type.Integer({ minimum: 3, maximum: 64, description: 'exhaust thermocouples on the ring, numbered from 1' }),
      firstAngleDeg: Type.Optional({ ...Angle, description: 'angle of thermocouple 1, degrees; the rest follow evenly spaced in increasing angle' }),
      anglesDeg: Type.Optional(Type.Array(Angle, { minItems: 3, maxItems: 64, description: 'the angle of each thermocouple in order (1, 2, …), degrees, for a ring that is not evenly spaced; give this or firstAngleDeg. The angles must increase round the ring in thermocouple order (the list may pass 360° once, e.g. [350, 10, 30, …]): neighbours are found by number, so a list out of ring order is refused with 422 naming the first angle out of place' })),
    },
    { additionalProperties: false, description: 'thermocouple 1 at firstAngleDeg then evenly spaced, or explicit angles' },
  ),
  chambers: Type.Object(
    { count: Type.Integer({ minimum: 3, maximum: 32, description: 'combustion chambers (cans), numbered from 1' }), firstAngleDeg: { ...Angle, description: 'angle of chamber 1 on the casing, degrees, read as the thermocouple angles are' } },
    { additionalProperties: false, description: 'chamber 1 at firstAngleDeg, the rest evenly spaced' },
  ),
  swirl: Type.Object(
    {
      sense: Type.Union([Type.Literal(1), Type.Literal(-1)], { description: 'direction of the turn: 1 when a plume lands at a larger angle than its chamber (towards increasing angle), −1 when at a smaller one' }),
      curve: Type.Array(Type.Tuple([Type.Number({ minimum: 0, maximum: 1.2, description: 'corrected load, fraction of the ISO rating' }), Type.Number({ minimum: -360, maximum: 360, description: 'swirl at that load, degrees' })]), { minItems: 1, maxItems: 50, description: '[corrected load fraction, swirl degrees] points sorted by load; the swirl is interpolated linearly between them, the shorter way round (a curve may cross 0°/360°: [[0.3, 350], [1.0, 20]] gives 5° at 65 % load), and held at the end values outside them' }),
      startupDeg: Type.Optional(Type.Number({ minimum: -360, maximum: 360, description: 'swirl during start-up, when flow is low' })),
    },
    { additionalProperties: false, description: "Swirl: how far the flow turns, round the axis, between a chamber's exit and the exhaust thermocouples, as a function of corrected load. Worked example: chambers {count: 12, firstAngleDeg: 15} put chamber 3 at 15 + 2·30 = 75°; with sense 1 and curve [[0.3, 92], [0.6, 74], [1.0, 55]], at 80 % corrected load the swirl is 74 + (0.8 − 0.6)/(1.0 − 0.6)·(55 − 74) = 64.5°, so chamber 3's plume lands at 75 + 64.5 = 139.5° on the ring (with sense −1, at 75 − 64.5 = 10.5°). Below the first point and above the last the end values hold. Fit a curve from data with POST /v1/units/{unitId}/swirl/calibrate." },
  ),
  temperatureUnit: Type.Union([Type.Literal('C'), Type.Literal('F')], { description: 'how people see temperatures of this unit (messages, pictures, review); the API always speaks °C' }),
  view: Type.Optional(Type.Union([Type.Literal('downstream'), Type.Literal('upstream')], { description: 'direction the angles are read looking in' })),
  correction: Type.Optional(
    Type.Object(
      { deltaExponent: Type.Number({ minimum: 0, maximum: 3, description: 'exponent of δ = ambient pressure (ambientKPa) / 101.325 kPa; default 1' }), thetaExponent: Type.Number({ minimum: 0, maximum: 3, description: 'exponent of θ = ambient temperature (ambientC, in kelvin) / 288.15 K; default 0.5' }) },
      { additionalProperties: false, description: 'corrected power = P / (δ^deltaExponent · θ^thetaExponent)' },
    ),
  ),
  modes: Type.Optional(
    Type.Record(
      Type.String({ pattern: '^[A-Za-z0-9_.-]{1,16}$' }),
      Type.Object(
        { spreadLimitC: Type.Optional(Type.Number({ minimum: 5, maximum: 200, description: "the spread limit in this mode, °C (hottest − coldest thermocouple), in place of the one learnt from the baseline" })) },
        { additionalProperties: false, description: 'settings of one combustion mode' },
      ),
      { description: "combustion modes by the code the site sends with each ring (the ring field mode), each with its own settings, e.g. {\"premix\": {\"spreadLimitC\": 35}}; a mode left out has the unit's settings" },
    ),
  ),
};

export const CreateUnitBody = Type.Object(
  {
    id: UnitId,
    name: Type.String({ minLength: 1, maxLength: 200, description: 'name people know the unit by' }),
    site: Type.String({ minLength: 1, maxLength: 200, description: 'the plant or site it stands at' }),
    family: Type.Optional(Family),
    ...UnitConfigFields,
    temperatureUnit: Type.Optional(UnitConfigFields.temperatureUnit),
  },
  { additionalProperties: false },
);
export type CreateUnitBody = Static<typeof CreateUnitBody>;

export const PatchUnitBody = Type.Object(
  {
    name: Type.Optional(Type.String({ minLength: 1, maxLength: 200, description: 'new name (changed in place, not versioned)' })),
    site: Type.Optional(Type.String({ minLength: 1, maxLength: 200, description: 'new site (changed in place, not versioned)' })),
    family: Type.Optional(Type.Union([Family, Type.Null()], { description: 'new configuration family (changed in place, not versioned); null takes the unit out of its family' })),
    ratedPowerMw: Type.Optional(UnitConfigFields.ratedPowerMw),
    thermocouples: Type.Optional(UnitConfigFields.thermocouples),
    chambers: Type.Optional(UnitConfigFields.chambers),
    swirl: Type.Optional(UnitConfigFields.swirl),
    temperatureUnit: Type.Optional(UnitConfigFields.temperatureUnit),
    view: UnitConfigFields.view,
    correction: UnitConfigFields.correction,
    modes: UnitConfigFields.modes,
    effectiveFrom: Type.Optional(Type.String({ format: 'date-time', description: 'when the new configuration takes effect; default now' })),
  },
  { additionalProperties: false, minProperties: 1 },
);
export type PatchUnitBody = Static<typeof PatchUnitBody>;

export const ConfigVersion = Type.Object({
  version: Type.Integer(),
  effectiveFrom: Type.Union([Type.String(), Type.Null()], { description: 'null: from the beginning' }),
  createdAt: Type.String(),
});

export const UnitReply = Type.Object({
  id: Type.String(),
  name: Type.String(),
  site: Type.String(),
  family: Type.Union([Type.String(), Type.Null()], { description: 'configuration family; null: none' }),
  ...UnitConfigFields,
  version: Type.Integer({ description: 'configuration version in force now' }),
  versions: Type.Array(ConfigVersion),
});
export type UnitReply = Static<typeof UnitReply>;

export const UnitParams = Type.Object({ unitId: { ...UnitId, description: 'the unit id given at registration (lower-case letters, digits and dashes, 1–40)' } });

/** What a read says is not judged yet, and why (services/core/judgement.ts). */
export const NotJudgedList = Type.Array(
  Type.Object({
    part: Type.Union([Type.Literal('analysis'), Type.Literal('baseline'), Type.Literal('residuals'), Type.Literal('limit'), Type.Literal('drift')], { description: 'what is not judged' }),
    reason: Type.String({ description: 'why, and when it will be or what to do' }),
  }),
  { description: 'what is not judged yet and why; empty when everything shown is judged' },
);

/** The settings a judgement needs from the worker's configuration. */
export interface JudgementSettings {
  baselineAutoDays: number;
  driftCron?: string | null;
}
