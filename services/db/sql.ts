/**
 * Literals for statements built as text (COPY … TO STDOUT takes no parameters): a quoted
 * string, a timestamptz to the microsecond, and a timestamptz column as ms since 1970.
 */
import { isoMicros } from './pg-binary.ts';

export const lit = (s: string) => "'" + s.replace(/'/g, "''") + "'";

export const tsLit = (ms: number) => `'${isoMicros(ms)}'::timestamptz`;

/** Milliseconds since 1970 of a timestamptz column, keeping microseconds as the fraction. */
export const msOf = (col: string) => `(extract(epoch from ${col}) * 1000)::float8`;
