/** Test helpers of the daemon tests: a logger that captures parsed JSON lines. */
import { Writable } from 'node:stream';
import pino, { type Logger } from 'pino';

export interface CapturedLogger {
  logger: Logger;
  lines: Array<Record<string, unknown> & { level: number; msg: string }>;
  /** Lines at warn (40) or above. */
  problems(): Array<Record<string, unknown>>;
}

export function captureLogger(level: pino.LevelWithSilent = 'debug'): CapturedLogger {
  const lines: CapturedLogger['lines'] = [];
  const stream = new Writable({
    write(chunk, _enc, cb) {
      for (const l of String(chunk).split('\n')) if (l.trim()) lines.push(JSON.parse(l));
      cb();
    },
  });
  const logger = pino({ level }, stream);
  return { logger, lines, problems: () => lines.filter((l) => l.level >= 40) };
}
