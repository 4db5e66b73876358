/**
 * The process logger: pino JSON lines on stdout, or human-readable lines (pino-pretty, in the same
 * thread so nothing is lost on exit) when stdout is a terminal. Secrets are redacted by key path
 * wherever they might appear in a logged object.
 */
import pino, { type Logger, type LevelWithSilent, type DestinationStream } from 'pino';
import pretty from 'pino-pretty';

/** Key paths whose values are replaced by "[redacted]" in every log line. */
export const REDACT_PATHS = [
  'token',
  'password',
  'authorization',
  'headers.authorization',
  'webhookUrl',
  '*.token',
  '*.password',
  '*.authorization',
  '*.webhookUrl',
  '*.headers.authorization',
  'config.store.influxdb.token',
  'config.store.influxdb.password',
];

export interface LoggerOptions {
  level?: LevelWithSilent;
  /** Pretty lines instead of JSON; default: when stdout is a TTY. */
  pretty?: boolean;
  /** Where lines go (tests pass a capture stream); default stdout. */
  destination?: DestinationStream | NodeJS.WritableStream;
  /** Base fields on every line. */
  base?: Record<string, unknown>;
}

export function createLogger(opts: LoggerOptions = {}): Logger {
  const usePretty = opts.pretty ?? Boolean(process.stdout.isTTY);
  const pinoOpts: pino.LoggerOptions = {
    level: opts.level ?? 'info',
    base: { name: 'radcast', ...(opts.base ?? {}) },
    redact: { paths: REDACT_PATHS, censor: '[redacted]' },
    timestamp: pino.stdTimeFunctions.isoTime,
    serializers: { err: pino.stdSerializers.err },
  };
  if (opts.destination) return pino(pinoOpts, opts.destination as DestinationStream);
  if (usePretty) return pino(pinoOpts, pretty({ colorize: true, translateTime: 'SYS:standard', ignore: 'pid,hostname,name', sync: true }));
  return pino(pinoOpts, pino.destination({ dest: 1, sync: false }));
}

/** Flush buffered log lines (async destination) before exit. */
export async function flushLogger(logger: Logger): Promise<void> {
  await new Promise<void>((resolve) => {
    try {
      logger.flush((err?: Error) => {
        void err;
        resolve();
      });
    } catch {
      resolve();
    }
  });
}
