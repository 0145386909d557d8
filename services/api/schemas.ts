/**
 * Request and response schemas shared by routes (TypeBox). The OpenAPI document is generated
 * from these; never describe a payload anywhere else.
 */
import { Type, type Static } from 'typebox';

export const ErrorReply = Type.Object(
  {
    error: Type.String(),
    message: Type.String(),
    details: Type.Optional(Type.Array(Type.Unknown())),
  },
  { $id: 'ErrorReply' },
);

export const UnitId = Type.String({ pattern: '^[a-z0-9-]{1,40}$', description: 'lower-case letters, digits and dashes, 1–40' });

const Angle = Type.Number({ minimum: 0, exclusiveMaximum: 360, description: 'degrees, 0 ≤ angle < 360' });

export const UnitConfigFields = {
  ratedPowerMw: Type.Number({ exclusiveMinimum: 0, maximum: 2000, description: 'generator output at ISO standard-day conditions, MW' }),
  thermocouples: Type.Object(
    {
      count: Type.Integer({ minimum: 3, maximum: 64 }),
      firstAngleDeg: Type.Optional(Angle),
      anglesDeg: Type.Optional(Type.Array(Angle, { minItems: 3, maxItems: 64 })),
    },
    { additionalProperties: false, description: 'thermocouple 1 at firstAngleDeg then evenly spaced, or explicit angles' },
  ),
  chambers: Type.Object(
    { count: Type.Integer({ minimum: 3, maximum: 32 }), firstAngleDeg: Angle },
    { additionalProperties: false, description: 'chamber 1 at firstAngleDeg, the rest evenly spaced' },
  ),
  swirl: Type.Object(
    {
      sense: Type.Union([Type.Literal(1), Type.Literal(-1)]),
      curve: Type.Array(Type.Tuple([Type.Number({ minimum: 0, maximum: 1.2 }), Type.Number({ minimum: -360, maximum: 360 })]), { minItems: 1, maxItems: 50 }),
      startupDeg: Type.Optional(Type.Number({ minimum: -360, maximum: 360, description: 'swirl during start-up, when flow is low' })),
    },
    { additionalProperties: false, description: 'curve: [corrected load fraction, degrees], sorted by load' },
  ),
  temperatureUnit: Type.Union([Type.Literal('C'), Type.Literal('F')]),
  view: Type.Optional(Type.Union([Type.Literal('downstream'), Type.Literal('upstream')], { description: 'direction the angles are read looking in' })),
  correction: Type.Optional(
    Type.Object(
      { deltaExponent: Type.Number({ minimum: 0, maximum: 3 }), thetaExponent: Type.Number({ minimum: 0, maximum: 3 }) },
      { additionalProperties: false, description: 'corrected power = P / (δ^deltaExponent · θ^thetaExponent)' },
    ),
  ),
};

export const CreateUnitBody = Type.Object(
  {
    id: UnitId,
    name: Type.String({ minLength: 1, maxLength: 200 }),
    site: Type.String({ minLength: 1, maxLength: 200 }),
    ...UnitConfigFields,
    temperatureUnit: Type.Optional(UnitConfigFields.temperatureUnit),
  },
  { additionalProperties: false },
);
export type CreateUnitBody = Static<typeof CreateUnitBody>;

export const PatchUnitBody = Type.Object(
  {
    name: Type.Optional(Type.String({ minLength: 1, maxLength: 200 })),
    site: Type.Optional(Type.String({ minLength: 1, maxLength: 200 })),
    ratedPowerMw: Type.Optional(UnitConfigFields.ratedPowerMw),
    thermocouples: Type.Optional(UnitConfigFields.thermocouples),
    chambers: Type.Optional(UnitConfigFields.chambers),
    swirl: Type.Optional(UnitConfigFields.swirl),
    temperatureUnit: Type.Optional(UnitConfigFields.temperatureUnit),
    view: UnitConfigFields.view,
    correction: UnitConfigFields.correction,
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
  ...UnitConfigFields,
  version: Type.Integer({ description: 'configuration version in force now' }),
  versions: Type.Array(ConfigVersion),
});
export type UnitReply = Static<typeof UnitReply>;

export const UnitParams = Type.Object({ unitId: UnitId });
