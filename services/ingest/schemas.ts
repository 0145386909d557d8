/**
 * Request and reply shapes of the ring endpoints (TypeBox), for the OpenAPI document. The body
 * of a batch is not checked against RingInput by the schema validator: each ring is checked by
 * validateRing, so one bad ring is reported by its index instead of failing the whole batch.
 */
import { Type } from 'typebox';

const Reading = Type.Union([Type.Number(), Type.Null()]);

export const RingInput = Type.Object(
  {
    unitId: Type.Optional(Type.String({ description: 'required on NDJSON lines; in a batch, must be the unit of the URL if given' })),
    ts: Type.String({ format: 'date-time', description: 'RFC 3339 with offset; kept to the millisecond' }),
    loadMw: Type.Number({ description: 'generator load, MW' }),
    ambientC: Type.Number({ description: 'ambient temperature, °C' }),
    ambientKPa: Type.Number({ description: 'ambient pressure, kPa' }),
    speedPct: Type.Number({ description: 'shaft speed, % of rated' }),
    cdtC: Type.Optional(Type.Union([Type.Number(), Type.Null()], { description: 'compressor discharge temperature, °C' })),
    cdpKPa: Type.Optional(Type.Union([Type.Number(), Type.Null()], { description: 'compressor discharge pressure, kPa' })),
    fuelFlowKgS: Type.Optional(Type.Union([Type.Number(), Type.Null()], { description: 'fuel flow, kg/s' })),
    flameDetected: Type.Optional(Type.Union([Type.Boolean(), Type.Null()], { description: 'the flame detectors see flame (used to follow starts and trips); null when not known' })),
    exhaustC: Type.Optional(Type.Array(Reading, { description: 'one reading per thermocouple, thermocouple 1 first; null for a missing reading' })),
    exhaustF: Type.Optional(Type.Array(Reading, { description: 'instead of exhaustC: readings in °F' })),
    exhaustMv: Type.Optional(Type.Array(Reading, { description: 'instead of exhaustC: Type K EMF in mV, with coldJunctionC' })),
    coldJunctionC: Type.Optional(Type.Number({ description: 'reference junction temperature for exhaustMv, °C' })),
    mode: Type.Optional(Type.Union([Type.String({ pattern: '^[A-Za-z0-9_.-]{1,16}$' }), Type.Null()], { description: "combustion mode the unit runs in, the site's own short code (1–16 letters, digits, '-', '_', '.'; e.g. \"premix\"): baselines are fitted per mode and a change of mode is a transient; leave out (or null) on a unit without modes" })),
  },
  { additionalProperties: false, description: 'one exhaust ring: exactly one of exhaustC, exhaustF, exhaustMv' },
);

export const RingBatchBody = Type.Object(
  { rings: Type.Array(RingInput, { description: 'up to CANSIGHT_MAX_BATCH_RINGS rings (10,000 by default)' }) },
  { additionalProperties: false },
);

export const RejectedRing = Type.Object({
  index: Type.Integer({ description: 'JSON batch: array index from 0; NDJSON: line number from 1; CSV: data row from 1 (the header is row 0)' }),
  field: Type.String(),
  reason: Type.String(),
});

export const IngestReply = Type.Object({
  accepted: Type.Integer({ description: 'rings stored by this request (all committed)' }),
  duplicates: Type.Integer({ description: 'rings already stored for the same unit and time; nothing changed' }),
  rejected: Type.Array(RejectedRing, { description: 'the first 1000 rejected rings' }),
  rejectedCount: Type.Integer({ description: 'all rejected rings' }),
});

export const UnitRingsParams = Type.Object({ unitId: Type.String({ pattern: '^[a-z0-9-]{1,40}$', description: 'the unit id given at registration' }) });
