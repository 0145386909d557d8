/** The Ajv every route validates with: bodies strictly, query strings and paths coercing text. */
import { Ajv } from 'ajv';
import addFormats from 'ajv-formats';

export function makeAjv(coerce: boolean): Ajv {
  const ajv = new Ajv({ allErrors: false, coerceTypes: coerce ? 'array' : false, removeAdditional: false, useDefaults: true, strict: false });
  addFormats.default(ajv);
  return ajv;
}
