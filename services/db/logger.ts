/**
 * The one logger: pino JSON, one line per event. Child loggers carry `unitId` or the process
 * role; nothing else writes to stdout for logging.
 */
import { pino, type Logger } from 'pino';

export type { Logger };

export function createLogger(level: string, bindings: Record<string, unknown> = {}): Logger {
  return pino({ level, base: { app: 'cansight', ...bindings } });
}
