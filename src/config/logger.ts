/**
 * The one logger factory: pino JSON lines, pretty (pino-pretty) when the output is a terminal.
 * Every field that can hold a secret is redacted by path, and - when given the loaded Secrets -
 * any secret value that turns up inside a message or error text (e.g. a URL echoed by a library)
 * is replaced as well.
 */
import pino, { type DestinationStream, type Logger } from 'pino';
import pretty from 'pino-pretty';
import type { Secrets } from './secrets.ts';

/** Key names that may carry a secret anywhere in a logged object. */
export const SECRET_KEYS = ['token', 'password', 'authorization', 'Authorization', 'webhookUrl', 'apiKey', 'secret', 'cookie'] as const;

/** Redaction paths: each secret key at the top level and up to three levels deep, plus HTTP headers. */
export const REDACT_PATHS: string[] = [
  ...SECRET_KEYS.flatMap((k) => [k, `*.${k}`, `*.*.${k}`, `*.*.*.${k}`]),
  'headers.authorization',
  'req.headers.authorization',
  'req.headers.cookie',
  'options.headers.Authorization',
  '*.headers.Authorization',
  '*.headers.authorization',
];

export const REDACTED = '[redacted]';

export interface LoggerOptions {
  level?: string;
  /** Pretty output; default: when the destination is stdout and stdout is a TTY. */
  pretty?: boolean;
  /** Where lines go (default stdout). Tests pass a capturing stream. */
  destination?: DestinationStream | NodeJS.WritableStream;
  /** Base fields added to every line. */
  base?: Record<string, unknown>;
  /** Loaded secrets: their values are scrubbed from messages and error texts. */
  secrets?: Secrets;
}

function scrubDeep(v: unknown, scrub: (s: string) => string, depth: number): unknown {
  if (typeof v === 'string') return scrub(v);
  if (v instanceof Error) {
    // Keep it an Error of the same class so pino's err serializer still reports its type.
    const e = Object.create(Object.getPrototypeOf(v)) as Error & Record<string, unknown>;
    for (const k of Object.keys(v)) e[k] = scrubDeep((v as unknown as Record<string, unknown>)[k], scrub, depth - 1);
    Object.defineProperty(e, 'message', { value: scrub(v.message), enumerable: false });
    if (v.stack) Object.defineProperty(e, 'stack', { value: scrub(v.stack), enumerable: false });
    if (v.cause !== undefined) Object.defineProperty(e, 'cause', { value: scrubDeep(v.cause, scrub, depth - 1), enumerable: false });
    return e;
  }
  if (depth <= 0 || v === null || typeof v !== 'object') return v;
  if (typeof (v as { toJSON?: unknown }).toJSON === 'function') return scrubDeep((v as { toJSON(): unknown }).toJSON(), scrub, depth - 1);
  if (Array.isArray(v)) return v.map((x) => scrubDeep(x, scrub, depth - 1));
  const out: Record<string, unknown> = {};
  for (const [k, x] of Object.entries(v)) out[k] = scrubDeep(x, scrub, depth - 1);
  return out;
}

export function createLogger(opts: LoggerOptions = {}): Logger {
  const toStdout = opts.destination === undefined;
  const usePretty = opts.pretty ?? (toStdout && process.stdout.isTTY === true);
  const secrets = opts.secrets;
  const scrub = secrets && secrets.values().length ? (s: string) => secrets.scrub(s) : undefined;
  const options: pino.LoggerOptions = {
    level: opts.level ?? 'info',
    base: { ...(opts.base ?? {}) },
    redact: { paths: REDACT_PATHS, censor: REDACTED },
    serializers: { err: pino.stdSerializers.err },
    ...(scrub
      ? {
          formatters: { log: (obj: Record<string, unknown>) => scrubDeep(obj, scrub, 4) as Record<string, unknown> },
          hooks: {
            logMethod(this: Logger, args: unknown[], method: (...a: unknown[]) => void) {
              method.apply(this, args.map((a) => (typeof a === 'string' ? scrub(a) : a)));
            },
          },
        }
      : {}),
  };
  const dest = (opts.destination ?? pino.destination({ dest: 1, sync: false })) as DestinationStream;
  if (usePretty) {
    const stream = pretty({ colorize: toStdout && process.stdout.isTTY === true, destination: dest as unknown as NodeJS.WritableStream, sync: true, translateTime: 'SYS:HH:MM:ss.l' });
    return pino(options, stream);
  }
  return pino(options, dest);
}
