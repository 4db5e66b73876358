/** A logger for store tests that keeps every record as a parsed object (assert on objects, not strings). */
import type { StoreLogger } from '../../src/store/influx/index.ts';

export interface LogRecord {
  level: 'debug' | 'info' | 'warn' | 'error';
  obj: Record<string, unknown>;
  msg: string;
}

export function captureLogger(): { logger: StoreLogger; records: LogRecord[] } {
  const records: LogRecord[] = [];
  const at = (level: LogRecord['level']) => (obj: object, msg: string) => {
    // Serialise now, like a real logger would, so later mutation cannot hide what was logged.
    records.push({ level, obj: JSON.parse(JSON.stringify(obj)) as Record<string, unknown>, msg });
  };
  return { logger: { debug: at('debug'), info: at('info'), warn: at('warn'), error: at('error') }, records };
}
