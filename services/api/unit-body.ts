/**
 * A unit registration body (POST /v1/units), checked the one way both doors check it: the
 * route, and `cansight import --register` reading a scenario's unit file. First the body
 * schema with the strict body options every route uses (no coercion, unknown fields refused),
 * then the identity is split from the configuration (temperatureUnit "C" unless given) and the
 * configuration's consistency is checked (angles against counts, swirl curve in load order…).
 */
import type { Ajv } from 'ajv';
import { checkUnitConfig } from '../core/unit-config.ts';
import type { UnitConfig } from '../core/types.ts';
import type { UnitIdentity } from '../db/units.ts';
import { makeAjv } from '../http/ajv.ts';
import { unprocessable } from '../http/errors.ts';
import { CreateUnitBody } from './schemas.ts';

let checkBody: ReturnType<Ajv['compile']> | undefined;

/**
 * Checks an untrusted value against the body schema of POST /v1/units. Throws the error the
 * route's own validation throws (a 400 through toErrorReply, naming each field).
 */
export function validateUnitBody(value: unknown): CreateUnitBody {
  checkBody ??= makeAjv(false).compile(CreateUnitBody);
  if (!checkBody(value)) throw Object.assign(new Error('invalid unit body'), { validation: checkBody.errors ?? [], validationContext: 'body' });
  return value as CreateUnitBody;
}

/** Splits a valid body into who the unit is and its configuration; a 422 when the configuration is inconsistent. */
export function unitFromBody(body: CreateUnitBody): { identity: UnitIdentity; config: UnitConfig } {
  const { id, name, site, family, ...rest } = body;
  const config = { temperatureUnit: 'C', ...rest } as UnitConfig;
  assertConsistent(config);
  return { identity: { id, name, site, family: family ?? null }, config };
}

/** A 422 naming each inconsistency of a configuration (a new unit's, or one changed by PATCH). */
export function assertConsistent(config: UnitConfig): void {
  const problems = checkUnitConfig(config);
  if (problems.length) {
    throw unprocessable(`The unit configuration is inconsistent: ${problems.map((p) => `${p.field} ${p.reason}`).join('; ')}`, problems);
  }
}
