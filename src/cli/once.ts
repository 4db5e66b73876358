/**
 * `radcast once --config FILE`: one cycle for every series (of this shard), then exit, for
 * external schedulers. Prints a summary table (or --json); exit code 0 when every series was
 * forecast, 1 when any failed or had stale input, 2 for bad usage or config.
 */
import type { Command } from 'commander';
import { openRuntime } from '../daemon/runtime.ts';
import { runAll } from '../daemon/runner.ts';
import { describeError } from '../daemon/errors.ts';
import { defaultContext, EXIT, loadConfigForCli, type CliContext } from './context.ts';
import { addCommonOptions, flushLogger, loggerFor, shardOption, workersOption, type DaemonCliOptions } from './common.ts';
import { formatRun, runJson } from './summary.ts';

interface OnceOptions extends DaemonCliOptions {
  at?: string;
  series?: string[];
  json?: boolean;
}

/** --at: an ISO-8601 instant with offset, or epoch ms. */
export function parseAt(v: string): number | null {
  if (/^\d{9,}$/.test(v)) return Number(v);
  if (!/(Z|[+-]\d{2}:?\d{2})$/i.test(v)) return null;
  const t = Date.parse(v);
  return Number.isFinite(t) ? t : null;
}

export function registerOnce(program: Command, ctx: CliContext = defaultContext()): void {
  addCommonOptions(program.command('once').description('run one cycle for every series and exit (non-zero exit code if any series failed)'))
    .option('--at <time>', 'cycle time instead of now: ISO-8601 with offset (e.g. 2026-11-30T06:05:00+01:00) or epoch ms; for replays and demos')
    .option('-s, --series <name...>', 'only these series')
    .option('--json', 'print the summary as one JSON document')
    .action(async (opts: OnceOptions) => {
      const loaded = loadConfigForCli(ctx, opts.config);
      if (!loaded) return;
      const workers = workersOption(ctx, opts.workers);
      const shard = shardOption(ctx, opts.shard);
      if (workers === null || shard === null) return;
      let nowMs: number | undefined;
      if (opts.at !== undefined) {
        const t = parseAt(opts.at);
        if (t === null) {
          ctx.io.err(`USAGE: --at "${opts.at}" is not an ISO-8601 time with offset or epoch milliseconds\n`);
          ctx.fail(EXIT.INVALID);
          return;
        }
        nowMs = t;
      }
      const logger = loggerFor(loaded, ctx, { level: opts.logLevel, toStderr: true });
      let rt;
      try {
        rt = await openRuntime(loaded, { logger, ...(workers !== undefined ? { workers } : {}), shard, env: ctx.env });
      } catch (err) {
        const e = describeError(err);
        ctx.io.err(`${e.code}: ${e.message}${e.hint ? ` (hint: ${e.hint})` : ''}\n`);
        ctx.fail(EXIT.FAILED);
        await flushLogger(logger);
        return;
      }
      try {
        let list = rt.owned;
        if (opts.series?.length) {
          const unknown = opts.series.filter((n) => !loaded.series.some((s) => s.name === n));
          if (unknown.length) {
            ctx.io.err(`USAGE: no such series in ${opts.config}: ${unknown.join(', ')}\n`);
            ctx.fail(EXIT.INVALID);
            return;
          }
          list = list.filter((s) => opts.series!.includes(s.name));
        }
        const sum = await runAll(rt.cycle, list, { concurrency: Math.max(1, loaded.config.daemon.concurrency * 2), ...(nowMs !== undefined ? { nowMs } : {}) });
        for (const r of sum.results) {
          if (r.ok) rt.stateStore.recordSuccess(r.series, rt.clock.now());
          else if (r.outcome !== 'aborted') rt.stateStore.recordFailure(r.series, rt.clock.now(), r.error?.code ?? 'INTERNAL');
        }
        rt.metrics.runDuration.observe(sum.wallMs / 1000);
        // Deliver the drift notices of this run once (what is not delivered stays in the outbox for the next run).
        if (rt.notifier) {
          const pass = await rt.notifier.flush();
          if (pass.failed) logger.warn({ delivered: pass.delivered, failed: pass.failed }, 'some drift notices were not delivered; they stay queued for the next run');
        }
        const byName = new Map(loaded.series.map((s) => [s.name, s]));
        ctx.io.out(opts.json ? JSON.stringify(runJson(sum)) + '\n' : formatRun(sum, byName));
        if (sum.failed + sum.stale + sum.aborted > 0) ctx.fail(EXIT.FAILED);
      } finally {
        await rt.close();
        await flushLogger(logger);
      }
    });
}
