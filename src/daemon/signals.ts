/**
 * Process signals of the daemon: SIGTERM / SIGINT stop it gracefully (a second one during the
 * shutdown forces an exit with code 1), SIGHUP reloads the config. Returns a function that removes
 * the handlers again.
 */
import type { Logger } from 'pino';

export interface SignalTarget {
  stop(): Promise<void>;
  reload(reason: 'sighup'): Promise<unknown>;
}

export interface SignalOptions {
  logger: Logger;
  /** Called once the graceful stop finished (the CLI flushes logs and exits 0). */
  onStopped: () => void;
  /** Forced exit (second signal). Default process.exit. */
  exit?: (code: number) => void;
  /** Where handlers are installed (tests pass an EventEmitter). Default process. */
  proc?: Pick<NodeJS.Process, 'on' | 'off'>;
}

export function installSignalHandlers(target: SignalTarget, opts: SignalOptions): () => void {
  const proc = opts.proc ?? process;
  let stopping = false;
  const onStop = (signal: NodeJS.Signals) => {
    if (stopping) {
      opts.logger.warn({ signal }, 'second stop signal during shutdown: exiting now');
      (opts.exit ?? process.exit)(1);
      return;
    }
    stopping = true;
    opts.logger.info({ signal }, 'stop signal received');
    target.stop().then(opts.onStopped, (err) => {
      opts.logger.error({ err }, 'shutdown failed');
      (opts.exit ?? process.exit)(1);
    });
  };
  const onHup = () => {
    opts.logger.info({ signal: 'SIGHUP' }, 'reload signal received');
    void target.reload('sighup');
  };
  proc.on('SIGTERM', onStop);
  proc.on('SIGINT', onStop);
  proc.on('SIGHUP', onHup);
  return () => {
    proc.off('SIGTERM', onStop);
    proc.off('SIGINT', onStop);
    proc.off('SIGHUP', onHup);
  };
}
