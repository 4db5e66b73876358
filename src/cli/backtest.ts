/**
 * `radcast backtest --config FILE [--series NAME] [--json] [--report FILE.html]`: the rolling-origin
 * backtest of every configured series (or one) against the seasonal-naive and ridge baselines,
 * read from the configured store. Prints a method x metric table and a per-lead summary, or one
 * JSON document; optionally writes the HTML report. A progress bar shows on a terminal only.
 *
 * Exit codes: 0 every series backtested, 1 some series failed (reported, the others still run),
 * 2 bad usage or config.
 */
import { writeFileSync } from 'node:fs';
import { resolve } from 'node:path';
import type { Command } from 'commander';
import cliProgress from 'cli-progress';
import { toSteps } from '../config/duration.ts';
import { loadSecrets } from '../config/secrets.ts';
import type { LoadedConfig } from '../config/load.ts';
import { openSeriesStore } from '../store/index.ts';
import type { SeriesStore } from '../store/types.ts';
import { historyStepsFor, loadBacktestInputs } from '../evaluate/load-series.ts';
import { backtest, backtestJson, formatStep, modelForecasts, type BacktestProgress, type BacktestResult } from '../evaluate/backtest.ts';
import { renderBacktestReport } from '../evaluate/report.ts';
import type { MetricSet } from '../evaluate/metrics.ts';
import { errorInfo, isoAt } from '../forecast/errors.ts';
import { defaultContext, EXIT, loadConfigForCli, type CliContext } from './context.ts';

interface BacktestCliOptions {
  config: string;
  series?: string;
  json?: boolean;
  report?: string;
  workers?: string;
  span?: string;
  every?: string;
}

/** Leads shown in the per-lead summary: 1, 2, 3 and about every eighth of the horizon, and H. */
export function summaryLeads(horizon: number): number[] {
  const set = new Set<number>([1, 2, 3, horizon]);
  for (let k = 1; k < 8; k++) set.add(Math.max(1, Math.round((k * horizon) / 8)));
  return [...set].filter((h) => h >= 1 && h <= horizon).sort((a, b) => a - b);
}

function num(v: number | null | undefined, mode: 'ratio' | 'value'): string {
  if (v === null || v === undefined || !Number.isFinite(v)) return '–';
  if (mode === 'ratio') return v.toFixed(3);
  const a = Math.abs(v);
  if (a >= 1e5 || (a > 0 && a < 1e-3)) return v.toExponential(2);
  return a >= 100 ? v.toFixed(1) : a >= 10 ? v.toFixed(2) : v.toFixed(3);
}

function table(rows: string[][], alignLeft = 1): string {
  const widths = rows[0].map((_, c) => Math.max(...rows.map((r) => r[c].length)));
  return rows.map((r) => '  ' + r.map((cell, c) => (c < alignLeft ? cell.padEnd(widths[c]) : cell.padStart(widths[c]))).join('  ')).join('\n') + '\n';
}

/** The terminal summary of one backtest: facts, method x metric, MASE by lead, notes. */
export function formatBacktest(r: BacktestResult): string {
  const step = formatStep(r.stepMs);
  const nominal = r.methods[0]?.overall.nominalCoverage;
  let out = `${r.series}: ${r.origins} origins every ${formatStep(r.everySteps * r.stepMs)} over the last ${formatStep(r.spanSteps * r.stepMs)}, horizon ${r.horizon} x ${step}, window ${formatStep(r.windowSteps * r.stepMs)}, MASE season m=${r.season}\n`;
  const head = ['method', 'MAE', 'RMSE', `MASE(m=${r.season})`, 'bias', `coverage(${nominal !== null && nominal !== undefined ? nominal.toFixed(2) : '–'})`, 'width', 'pinball'];
  const row = (name: string, s: MetricSet) => [name, num(s.mae, 'value'), num(s.rmse, 'value'), num(s.mase, 'ratio'), num(s.bias, 'value'), num(s.coverage, 'ratio'), num(s.width, 'value'), num(s.pinball, 'value')];
  out += table([head, ...r.methods.map((m) => row(m.name, m.overall))]);
  const leads = summaryLeads(r.horizon);
  out += `  MASE by lead (steps of ${step}):\n`;
  out += table([['method', ...leads.map(String)], ...r.methods.map((m) => [m.name, ...leads.map((h) => num(m.byLead[h - 1]?.mase, 'ratio'))])]);
  const model = r.methods.find((m) => m.kind === 'model');
  if (model) out += table([['coverage', ...leads.map(String)], [model.name, ...leads.map((h) => num(model.byLead[h - 1]?.coverage, 'ratio'))]]);
  const notes: string[] = [`fit median ${Number.isFinite(r.fit.medianMs) ? Math.round(r.fit.medianMs) : '–'} ms (${r.fit.coldFits} cold, ${r.fit.warmFits} warm), ${r.workers} worker(s), ${(r.elapsedMs / 1000).toFixed(1)} s`];
  if (r.auto.tunables.length) notes.push(`auto ${r.auto.tunables.join(', ')} chose ${r.auto.chosen.map((c) => `K=${c.nCentres} ${c.widthMode} ridge=${c.ridge} at ${c.origins} origin(s)`).join('; ')}`);
  for (const [name, how] of Object.entries(r.exoAtTarget)) notes.push(`input ${name} at target time: ${how === 'forecast' ? 'its own forecast from each origin' : 'observed values (a perfect forecast; the scores are optimistic)'}`);
  if (r.skippedForHistory) notes.push(`${r.skippedForHistory} origin(s) skipped: not a full window of history before them`);
  for (const f of r.failed.slice(0, 5)) notes.push(`origin ${isoAt(f.originMs)} failed: ${f.code} ${f.message}`);
  if (r.failed.length > 5) notes.push(`... and ${r.failed.length - 5} more failed origins`);
  out += notes.map((n) => `  ${n}\n`).join('');
  return out;
}

/** Steps from an option given as a step count or a duration; null (and a usage error) when invalid. */
function stepsOption(ctx: CliContext, v: string | undefined, stepMs: number, what: string): number | undefined | null {
  if (v === undefined) return undefined;
  const r = toSteps(/^\d+$/.test(v) ? Number(v) : v, stepMs, what);
  if (!r.ok || r.value < 1) {
    ctx.io.err(`USAGE: ${what}: ${r.ok ? 'must be at least one step' : `${r.message} (hint: ${r.hint})`}\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  return r.value;
}

export interface RunBacktestsOptions {
  series?: string;
  workers?: number;
  spanSteps?: number;
  everySteps?: number;
  /** Progress per series (the CLI draws a bar with it on a terminal). */
  onProgress?: (series: string, p: BacktestProgress) => void;
  nowMs?: number;
}

/**
 * Backtests the selected series of a loaded config from its store. Failures are per series:
 * `results` holds the successful ones, `errors` the others (code, message, hint).
 */
export async function runBacktests(loaded: LoadedConfig, store: SeriesStore, opts: RunBacktestsOptions = {}): Promise<{ results: BacktestResult[]; errors: Array<{ series: string; code: string; message: string; hint: string }> }> {
  // Inputs first: a series whose forecast feeds another at target time is backtested before it, and
  // its forecasts at each origin are reused instead of being fitted again.
  const selected = loaded.series
    .filter((s) => opts.series === undefined || s.name === opts.series)
    .sort((a, b) => Number(b.exogenous.length === 0) - Number(a.exogenous.length === 0));
  const known: Record<string, Record<string, number[]>> = {};
  const exoSettings = Object.fromEntries(loaded.series.map((s) => [s.name, s.settings]));
  const results: BacktestResult[] = [];
  const errors: Array<{ series: string; code: string; message: string; hint: string }> = [];
  for (const r of selected) {
    try {
      const st = r.settings;
      const spanSteps = opts.spanSteps ?? r.backtest.spanSteps;
      const everySteps = opts.everySteps ?? r.backtest.everySteps;
      // Same reading and regularising as `radcast tune` (src/evaluate/load-series.ts); the range
      // covers the first origin's window, the windows of inputs forecast on their own, the span and
      // one horizon of actuals (plus one step of margin).
      const historySteps = historyStepsFor(r, spanSteps, { configured: loaded.series }) + 1;
      const { target, exo } = await loadBacktestInputs(store, r, { historySteps, configured: loaded.series, now: () => opts.nowMs ?? Date.now() });
      const res = await backtest(target, exo, st, {
        spanSteps,
        everySteps,
        exoSettings,
        exoForecasts: known,
        ...(opts.workers !== undefined ? { workers: opts.workers } : {}),
        ...(opts.onProgress ? { onProgress: (p: BacktestProgress) => opts.onProgress!(r.name, p) } : {}),
      });
      results.push(res);
      known[r.name] = modelForecasts(res);
    } catch (err) {
      errors.push({ series: r.name, ...errorInfo(err) });
    }
  }
  return { results, errors };
}

export function registerBacktest(program: Command, ctx: CliContext = defaultContext()): void {
  program
    .command('backtest')
    .description('rolling-origin backtest of the model beside seasonal-naive and ridge baselines, per series')
    .requiredOption('-c, --config <file>', 'config file (YAML)')
    .option('-s, --series <name>', 'only this series (default: every series)')
    .option('--json', 'print one JSON document (an array when several series are backtested)')
    .option('--report <file>', 'write a self-contained HTML report with charts')
    .option('--workers <n>', 'worker threads for the origins (0 = main thread; default: one per core)')
    .option('--span <steps|duration>', 'origins over this last part of the history (default: backtest.span)')
    .option('--every <steps|duration>', 'spacing of the origins (default: backtest.every)')
    .action(async (opts: BacktestCliOptions) => {
      const loaded = loadConfigForCli(ctx, opts.config);
      if (!loaded) return;
      if (opts.series !== undefined && !loaded.series.some((s) => s.name === opts.series)) {
        ctx.io.err(`USAGE: no series "${opts.series}" in ${opts.config}; configured: ${loaded.series.map((s) => s.name).join(', ')}\n`);
        ctx.fail(EXIT.INVALID);
        return;
      }
      let workers: number | undefined;
      if (opts.workers !== undefined) {
        const n = Number(opts.workers);
        if (!Number.isInteger(n) || n < 0 || n > 256) {
          ctx.io.err(`USAGE: --workers must be an integer from 0 to 256, not "${opts.workers}"\n`);
          ctx.fail(EXIT.INVALID);
          return;
        }
        workers = n;
      }
      const stepMs = (opts.series ? loaded.series.find((s) => s.name === opts.series)! : loaded.series[0]).settings.stepMs;
      const spanSteps = stepsOption(ctx, opts.span, stepMs, '--span');
      const everySteps = stepsOption(ctx, opts.every, stepMs, '--every');
      if (spanSteps === null || everySteps === null) return;

      let store: SeriesStore;
      try {
        const { secrets } = loadSecrets(loaded.config, { env: ctx.env });
        store = await openSeriesStore(loaded.config, { secrets });
      } catch (err) {
        const e = errorInfo(err);
        ctx.io.err(`${e.code}: ${e.message} (hint: ${e.hint})\n`);
        ctx.fail(EXIT.FAILED);
        return;
      }
      // A bar on a terminal only; pipes and CI logs stay quiet.
      const tty = process.stderr.isTTY === true;
      let bar: cliProgress.SingleBar | null = null;
      let barSeries = '';
      const onProgress = tty
        ? (series: string, p: BacktestProgress) => {
            if (series !== barSeries) {
              bar?.stop();
              barSeries = series;
              bar = new cliProgress.SingleBar({ format: `backtest {series} [{bar}] {value}/{total} origins, {eta_formatted} left`, hideCursor: true, clearOnComplete: true, stream: process.stderr }, cliProgress.Presets.shades_classic);
              bar.start(p.total, p.done, { series });
            } else bar?.update(p.done, { series });
          }
        : undefined;
      let out: Awaited<ReturnType<typeof runBacktests>>;
      try {
        out = await runBacktests(loaded, store, {
          ...(opts.series !== undefined ? { series: opts.series } : {}),
          ...(workers !== undefined ? { workers } : {}),
          ...(spanSteps !== undefined ? { spanSteps } : {}),
          ...(everySteps !== undefined ? { everySteps } : {}),
          ...(onProgress ? { onProgress } : {}),
        });
      } finally {
        (bar as cliProgress.SingleBar | null)?.stop();
        await store.close();
      }
      for (const e of out.errors) ctx.io.err(`backtest ${e.series}: ${e.code} ${e.message} (hint: ${e.hint})\n`);
      if (out.errors.length) ctx.fail(EXIT.FAILED);
      if (opts.json) {
        const docs = out.results.map(backtestJson);
        ctx.io.out(JSON.stringify(docs.length === 1 && opts.series !== undefined ? docs[0] : docs.length === 1 && loaded.series.length === 1 ? docs[0] : docs, null, 2) + '\n');
      } else {
        ctx.io.out(out.results.map(formatBacktest).join('\n'));
      }
      if (opts.report && out.results.length) {
        const file = resolve(ctx.cwd, opts.report);
        writeFileSync(file, renderBacktestReport(out.results, { timeZones: Object.fromEntries(loaded.series.map((s) => [s.name, s.settings.features.timeZone])) }));
        ctx.io.err(`wrote the backtest report to ${opts.report}\n`);
      }
    });
}
