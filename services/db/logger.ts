/**
 * The one logger: pino JSON, one line per event. Child loggers carry `unitId` or the process
 * role; nothing else writes to stdout for logging.
 */
import { pino, type DestinationStream, type Logger } from 'pino';

export type { Logger };

/** `destination` defaults to stdout; tests pass their own to read what was logged. */
export function createLogger(level: string, bindings: Record<string, unknown> = {}, destination?: DestinationStream): Logger {
  const options = { level, base: { app: 'cansight', ...bindings } };
  return destination ? pino(options, destination) : pino(options);
}
