/** Options and helpers shared by the daemon commands (run, once, demo). */
import pino, { type Logger } from 'pino';
import type { Command } from 'commander';
import { createLogger } from '../config/logger.ts';
import type { LoadedConfig } from '../config/load.ts';
import { loadSecrets } from '../config/secrets.ts';
import { resolveShard, formatShardError, type ShardSpec } from '../daemon/shard.ts';
import { EXIT, type CliContext } from './context.ts';

export interface DaemonCliOptions {
  config: string;
  shard?: string;
  workers?: string;
  logLevel?: string;
}

export function addCommonOptions(cmd: Command): Command {
  return cmd
    .requiredOption('-c, --config <file>', 'config file (YAML)')
    .option('--shard <I/N>', 'own only the series of shard I of N (0-based); also RADCAST_SHARD')
    .option('--workers <n>', 'fit worker threads (0 = fit in the main thread); default daemon.concurrency')
    .option('--log-level <level>', 'log level (overrides log.level)');
}

/** Worker count from --workers, or undefined (use the config). Prints and fails on a bad value. */
export function workersOption(ctx: CliContext, v: string | undefined): number | undefined | null {
  if (v === undefined) return undefined;
  const n = Number(v);
  if (!Number.isInteger(n) || n < 0 || n > 256) {
    ctx.io.err(`USAGE: --workers must be an integer from 0 to 256, not "${v}"\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  return n;
}

export function shardOption(ctx: CliContext, v: string | undefined): ShardSpec | null {
  const r = resolveShard({ ...(v !== undefined ? { option: v } : {}), env: ctx.env });
  if (!r.ok) {
    ctx.io.err(`${formatShardError(r.error)}\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  return r.shard;
}

/**
 * The process logger for a daemon command: JSON lines (pretty on a terminal), secrets of the
 * config scrubbed. `toStderr` keeps stdout free for a command's own output (once, demo).
 */
export function loggerFor(loaded: LoadedConfig, ctx: CliContext, opts: { level?: string; toStderr?: boolean }): Logger {
  const { secrets } = loadSecrets(loaded.config, { env: ctx.env });
  const level = opts.level ?? loaded.config.log.level;
  if (opts.toStderr) {
    const tty = process.stderr.isTTY === true;
    return createLogger({ level, secrets, destination: pino.destination({ dest: 2, sync: true }), pretty: tty });
  }
  return createLogger({ level, secrets });
}

/** Flush pino's buffered lines (async destination) before the process ends. */
export function flushLogger(logger: Logger): Promise<void> {
  return new Promise((resolve) => {
    try {
      logger.flush(() => resolve());
    } catch {
      resolve();
    }
  });
}
