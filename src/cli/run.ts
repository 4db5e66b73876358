/**
 * `radcast run --config FILE`: the long-running daemon (see src/daemon/daemon.ts). Returns when
 * the daemon has stopped after SIGTERM / SIGINT; SIGHUP reloads the config.
 */
import type { Command } from 'commander';
import { Daemon } from '../daemon/daemon.ts';
import { installSignalHandlers } from '../daemon/signals.ts';
import { describeError } from '../daemon/errors.ts';
import { defaultContext, EXIT, loadConfigForCli, type CliContext } from './context.ts';
import { addCommonOptions, flushLogger, loggerFor, shardOption, workersOption, type DaemonCliOptions } from './common.ts';

interface RunOptions extends DaemonCliOptions {
  initialRun: boolean;
  port?: string;
}

/**
 * After a graceful stop the process should end by itself; if a library keeps a handle open, this
 * guard ends it after a grace period. Tests that run the command in-process switch it off.
 */
export const runGuards = { forceExitAfterMs: 3000 };

export function registerRun(program: Command, ctx: CliContext = defaultContext()): void {
  addCommonOptions(program.command('run').description('run the daemon: per-series refit schedules, HTTP health, metrics and status page'))
    .option('--no-initial-run', 'do not run a first cycle at start for series without a fresh forecast')
    .option('--port <port>', 'HTTP port (overrides http.port; 0 = any free port)')
    .action(async (opts: RunOptions) => {
      const loaded = loadConfigForCli(ctx, opts.config);
      if (!loaded) return;
      const workers = workersOption(ctx, opts.workers);
      const shard = shardOption(ctx, opts.shard);
      if (workers === null || shard === null) return;
      let httpPort: number | undefined;
      if (opts.port !== undefined) {
        httpPort = Number(opts.port);
        if (!Number.isInteger(httpPort) || httpPort < 0 || httpPort > 65535) {
          ctx.io.err(`USAGE: --port must be an integer from 0 to 65535, not "${opts.port}"\n`);
          ctx.fail(EXIT.INVALID);
          return;
        }
      }
      const logger = loggerFor(loaded, ctx, { level: opts.logLevel });
      const daemon = new Daemon({ loaded, logger, shard, initialRun: opts.initialRun, env: ctx.env, ...(workers !== undefined ? { workers } : {}), ...(httpPort !== undefined ? { httpPort } : {}) });
      let stopped!: () => void;
      const done = new Promise<void>((resolve) => (stopped = resolve));
      const remove = installSignalHandlers(daemon, { logger, onStopped: () => stopped() });
      try {
        await daemon.start();
      } catch (err) {
        const e = describeError(err);
        logger.fatal({ code: e.code, hint: e.hint, err: e.message }, 'daemon could not start');
        ctx.io.err(`${e.code}: ${e.message}${e.hint ? ` (hint: ${e.hint})` : ''}\n`);
        remove();
        await daemon.stop();
        await flushLogger(logger);
        ctx.fail(EXIT.FAILED);
        return;
      }
      await done;
      remove();
      await flushLogger(logger);
      if (runGuards.forceExitAfterMs > 0) setTimeout(() => process.exit(ctx.exitCode), runGuards.forceExitAfterMs).unref();
    });
}
