/** The slice of a pino logger the adapter uses: structured object first, message second. */
export interface Logger {
  debug(obj: object, msg: string): void;
  info(obj: object, msg: string): void;
  warn(obj: object, msg: string): void;
  error(obj: object, msg: string): void;
}

const noop = (): void => undefined;
/** Default when no logger is injected: the daemon always injects its own. */
export const silentLogger: Logger = { debug: noop, info: noop, warn: noop, error: noop };
