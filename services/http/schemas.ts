/**
 * Schemas every route set shares (TypeBox): the error envelope of every 4xx/5xx reply, added
 * to the server once under the id "ErrorReply". A route set's own payloads live beside it.
 */
import { Type } from 'typebox';

export const ErrorReply = Type.Object(
  {
    error: Type.String(),
    message: Type.String(),
    details: Type.Optional(Type.Array(Type.Unknown())),
  },
  { $id: 'ErrorReply' },
);
