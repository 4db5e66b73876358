/**
 * `radcast demo` (`npm run demo`): the quick start on the invented Oskaveld district heating
 * network, on a fresh embedded store.
 *
 *  1. loads demo-data/*.csv into a new embedded store (the files config/demo.yaml points to,
 *     var/demo/ by default; existing files there are replaced)
 *  2. backtests every series over the four weeks before the replay (rolling origins, the same
 *     fit and forecast path as the daemon): MASE against the seasonal-naive baselines, the
 *     baseline error level for drift detection, and the first residuals for the bands
 *  3. replays the daemon over the last days of the data, one cycle a day at 00:05 local time on a
 *     fake clock (warm-started refits, forecasts written, matured forecasts scored, drift assessed);
 *     the last cycle runs at the end of the data and forecasts the next day
 *  4. writes the backtest report (HTML) and prints a summary table per series
 */
import { existsSync, mkdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import path from 'node:path';
import type { Command } from 'commander';
import type { LoadedConfig } from '../config/load.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import { EmbeddedStore } from '../store/embedded.ts';
import { regularize } from '../series/index.ts';
import type { RegularSeries } from '../series/types.ts';
import { backtest, type BacktestResult } from '../evaluate/backtest.ts';
import { renderBacktestReport } from '../evaluate/report.ts';
import { MODEL_METHOD } from '../evaluate/backtest-chain.ts';
import { addResiduals, createResidualPool, DEFAULT_RESIDUAL_CAPACITY, originPhase } from '../evaluate/bands.ts';
import { openRuntime, type Runtime } from '../daemon/runtime.ts';
import { runAll, type RunSummary } from '../daemon/runner.ts';
import { describeError } from '../daemon/errors.ts';
import { parseReadingsCsv } from './csv.ts';
import { defaultContext, EXIT, loadConfigForCli, type CliContext } from './context.ts';
import { flushLogger, loggerFor, workersOption } from './common.ts';
import { localTime, peakOf, table } from './summary.ts';

const DAY_MS = 86_400_000;

interface DemoOptions {
  config: string;
  data: string;
  replayDays: string;
  report?: string;
  workers?: string;
  logLevel: string;
}

export interface DemoSeriesRow {
  series: string;
  timeZone: string;
  outcome: string;
  code: string | null;
  peak: ReturnType<typeof peakOf>;
  maseModel: number | null;
  maseSeasonalDaily: number | null;
  maseSeasonalWeekly: number | null;
  season: number | null;
  backtestOrigins: number;
  driftState: string | null;
  recentMase: number | null;
  baselineMase: number | null;
}

export interface DemoResult {
  storePath: string;
  statePath: string;
  reportPath: string;
  dataEndMs: number;
  replayFromMs: number;
  cycles: number;
  rows: DemoSeriesRow[];
  elapsedMs: number;
  failedSeries: string[];
}

function removeDb(file: string): void {
  for (const f of [file, `${file}-wal`, `${file}-shm`]) rmSync(f, { force: true });
}

/** Regular grids of a series and its exogenous inputs over [startMs, endMs) (inputs at target time reach H steps further). */
function grids(r: ResolvedSeries, startMs: number, endMs: number, readings: Map<string, ReturnType<typeof parseReadingsCsv>['readings']>) {
  const step = r.settings.stepMs;
  const opts = { ...r.settings.regularize, stepMs: step, startMs, endMs, series: r.name };
  const target = regularize((readings.get(r.name) ?? []).filter((x) => x.t >= startMs && x.t < endMs), opts);
  const exo: Record<string, RegularSeries> = {};
  for (const e of r.exogenous) {
    const end = e.atTarget ? endMs + r.settings.features.horizon * step : endMs;
    exo[e.name] = regularize((readings.get(e.name) ?? []).filter((x) => x.t >= startMs && x.t < end), { ...opts, endMs: end, series: e.name });
  }
  return { target, exo };
}

export async function runDemo(
  ctx: CliContext,
  loaded: LoadedConfig,
  opts: { dataDir: string; replayDays: number; reportPath: string; workers?: number; logLevel: string; progress?: (line: string) => void },
): Promise<DemoResult | null> {
  const t0 = performance.now();
  const progress = opts.progress ?? ((l: string) => ctx.io.err(l + '\n'));
  const cfg = loaded.config;
  if (cfg.store.kind !== 'embedded') {
    ctx.io.err(`STORE_KIND: the demo runs on the embedded store; ${loaded.file ?? 'the config'} uses store.kind ${cfg.store.kind}\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  const storePath = cfg.store.embedded.path;
  const statePath = cfg.state.path;

  // 1. fresh store with the demo data
  const names = new Set<string>();
  for (const s of loaded.series) {
    names.add(s.name);
    for (const e of s.exogenous) names.add(e.name);
  }
  const readings = new Map<string, ReturnType<typeof parseReadingsCsv>['readings']>();
  for (const name of names) {
    const file = path.join(opts.dataDir, `${name}.csv`);
    if (!existsSync(file)) {
      ctx.io.err(`DEMO_DATA: ${file} is missing (hint: regenerate with npx tsx demo-data/generate.ts)\n`);
      ctx.fail(EXIT.INVALID);
      return null;
    }
    const parsed = parseReadingsCsv(readFileSync(file, 'utf8'));
    if (parsed.issueCount > 0) {
      ctx.io.err(`DEMO_DATA: ${file} has ${parsed.issueCount} bad line(s), e.g. line ${parsed.issues[0].line}: ${parsed.issues[0].message}\n`);
      ctx.fail(EXIT.INVALID);
      return null;
    }
    readings.set(name, parsed.readings.sort((a, b) => a.t - b.t));
  }
  mkdirSync(path.dirname(storePath), { recursive: true });
  mkdirSync(path.dirname(statePath), { recursive: true });
  removeDb(storePath);
  removeDb(statePath);
  const store = new EmbeddedStore({ path: storePath });
  let nReadings = 0;
  store.transaction(() => {
    for (const [name, list] of readings) nReadings += store.writeReadings(name, list);
  });
  let lastMs = -Infinity;
  for (const s of loaded.series) {
    const list = readings.get(s.name) ?? [];
    if (list.length) lastMs = Math.max(lastMs, list[list.length - 1].t);
  }
  const step = Math.min(...loaded.series.map((s) => s.settings.stepMs));
  const dataEndMs = Math.floor(lastMs / step) * step + step;
  const replayFromMs = dataEndMs - opts.replayDays * DAY_MS;
  progress(`demo: ${nReadings} readings of ${names.size} series loaded into ${storePath}; data end ${new Date(dataEndMs).toISOString()}`);

  const logger = loggerFor(loaded, ctx, { level: opts.logLevel, toStderr: true });
  let rt: Runtime;
  try {
    rt = await openRuntime(loaded, { logger, store, ...(opts.workers !== undefined ? { workers: opts.workers } : {}), env: ctx.env });
  } catch (err) {
    await store.close();
    const e = describeError(err);
    ctx.io.err(`${e.code}: ${e.message}${e.hint ? ` (hint: ${e.hint})` : ''}\n`);
    ctx.fail(EXIT.FAILED);
    await flushLogger(logger);
    return null;
  }
  try {
    // 2. backtest on the data before the replay
    const bySeries = new Map(loaded.series.map((s) => [s.name, s]));
    const exoSettings = Object.fromEntries(loaded.series.map((s) => [s.name, s.settings]));
    const backtests = new Map<string, BacktestResult>();
    for (const r of rt.owned) {
      const st = r.settings.stepMs;
      const span = r.backtest.spanSteps;
      const startMs = replayFromMs - (r.settings.windowSteps + span + r.maxLagSteps + r.settings.features.horizon + 1) * st;
      const { target, exo } = grids(r, startMs, replayFromMs, readings);
      const tb = performance.now();
      try {
        const res = await backtest(target, exo, r.settings, {
          spanSteps: span,
          everySteps: r.backtest.everySteps,
          exoSettings,
          // Few long warm-started chains (one per worker): cold fits are the expensive ones.
          chainLength: Math.ceil(r.backtest.origins / Math.max(1, opts.workers ?? cfg.daemon.concurrency)),
          ...(opts.workers !== undefined ? { workers: opts.workers } : {}),
        });
        backtests.set(r.name, res);
        const model = res.methods.find((m) => m.name === MODEL_METHOD);
        if (model?.overall.mase && Number.isFinite(model.overall.mase)) {
          rt.state.putBaseline(r.name, {
            mase: model.overall.mase,
            byLead: model.byLead.map((l) => l.mase ?? Number.NaN),
            source: 'backtest',
            atMs: replayFromMs,
          });
        }
        // The backtest's matured forecasts seed the band residuals, as the daemon's own would.
        const phases = r.settings.features.seasonSteps;
        const pool = createResidualPool(r.settings.features.horizon, DEFAULT_RESIDUAL_CAPACITY, phases);
        for (const d of res.details) {
          const f = d.forecasts[MODEL_METHOD];
          d.actual.forEach((a, h) => addResiduals(pool, h + 1, [a - f[h]], originPhase(d.originMs, st, phases)));
        }
        await rt.state.putResidualPool(r.name, pool);
        progress(`demo: backtest ${r.name}: ${res.origins} origins in ${((performance.now() - tb) / 1000).toFixed(1)} s`);
      } catch (err) {
        const e = describeError(err);
        progress(`demo: backtest ${r.name} failed: ${e.code} ${e.message}`);
      }
    }

    // 3. replay the daemon, one cycle a day, ending at the end of the data
    const offsetMs = 5 * 60_000;
    let last: RunSummary | null = null;
    let cycles = 0;
    for (let at = replayFromMs; at <= dataEndMs; at += DAY_MS) {
      const sum = await runAll(rt.cycle, rt.owned, { concurrency: Math.max(1, cfg.daemon.concurrency * 2), nowMs: at + offsetMs });
      for (const r of sum.results) {
        if (r.ok) rt.stateStore.recordSuccess(r.series, at + offsetMs);
        else rt.stateStore.recordFailure(r.series, at + offsetMs, r.error?.code ?? 'INTERNAL');
      }
      cycles++;
      last = sum;
      const bad = sum.results.filter((r) => !r.ok).map((r) => `${r.series} ${r.error?.code}`);
      progress(`demo: cycle ${cycles} at ${new Date(at + offsetMs).toISOString()}: ${sum.ok}/${sum.results.length} ok${bad.length ? ` (${bad.join(', ')})` : ''}, ${(sum.wallMs / 1000).toFixed(1)} s`);
    }

    // 4. report and summary
    mkdirSync(path.dirname(opts.reportPath), { recursive: true });
    const results = [...backtests.values()];
    writeFileSync(
      opts.reportPath,
      renderBacktestReport(results, {
        title: 'radcast demo backtest: Oskaveld district heating (invented data)',
        timeZones: Object.fromEntries(loaded.series.map((s) => [s.name, s.settings.features.timeZone])),
        generatedAt: new Date(dataEndMs),
      }),
    );
    const rows: DemoSeriesRow[] = (last?.results ?? []).map((r) => {
      const s = bySeries.get(r.series);
      const bt = backtests.get(r.series);
      const mase = (name: string) => bt?.methods.find((m) => m.name === name)?.overall.mase ?? null;
      return {
        series: r.series,
        timeZone: s?.settings.features.timeZone ?? 'UTC',
        outcome: r.outcome,
        code: r.error?.code ?? null,
        peak: r.forecast ? peakOf(r.forecast) : null,
        maseModel: mase(MODEL_METHOD),
        maseSeasonalDaily: mase('seasonal-naive-daily'),
        maseSeasonalWeekly: mase('seasonal-naive-weekly'),
        season: bt?.season ?? null,
        backtestOrigins: bt?.origins ?? 0,
        driftState: r.drift?.state ?? (s?.drift.enabled === false ? 'off' : null),
        recentMase: r.drift && Number.isFinite(r.drift.recentMase) ? r.drift.recentMase : null,
        baselineMase: r.drift && Number.isFinite(r.drift.baselineMase) ? r.drift.baselineMase : null,
      };
    });
    return {
      storePath,
      statePath,
      reportPath: opts.reportPath,
      dataEndMs,
      replayFromMs,
      cycles,
      rows,
      elapsedMs: performance.now() - t0,
      failedSeries: (last?.results ?? []).filter((r) => !r.ok).map((r) => r.series),
    };
  } finally {
    await rt.close();
    await flushLogger(logger);
  }
}

const n = (v: number | null, d = 2) => (v === null || !Number.isFinite(v) ? '-' : v.toFixed(d));

export function formatDemo(res: DemoResult, configArg: string): string {
  const rows = res.rows.map((r) => [
    r.series,
    r.peak ? `${n(r.peak.value, 1)}` : '-',
    r.peak ? localTime(r.peak.t, r.timeZone) : '-',
    r.peak && r.peak.lower !== null ? `${n(r.peak.lower, 1)} .. ${n(r.peak.upper, 1)}` : '-',
    n(r.maseModel),
    n(r.maseSeasonalDaily),
    n(r.maseSeasonalWeekly),
    r.driftState ?? '-',
    r.recentMase !== null ? `${n(r.recentMase)} / ${n(r.baselineMase)}` : '-',
    r.outcome === 'ok' ? '' : `${r.outcome} ${r.code ?? ''}`,
  ]);
  let out = '\nradcast demo: Oskaveld district heating network (invented data)\n\n';
  out += `Next-day forecast from ${new Date(res.dataEndMs).toISOString()} (end of the data); band = 10%..90%; MASE from the backtest\n`;
  out += `(season m = ${res.rows[0]?.season ?? '-'} steps; below 1 beats the seasonal-naive scale); drift after ${res.cycles} replayed daily cycles.\n\n`;
  out += table(['series', 'peak', 'peak at (local)', 'band at peak', 'MASE rbf', 'naive day', 'naive week', 'drift', 'recent/base MASE', 'problem'], rows);
  out += `\nfinished in ${(res.elapsedMs / 1000).toFixed(1)} s\n\nWhere to look next:\n`;
  out += `  backtest report   ${res.reportPath}\n`;
  out += `  embedded store    ${res.storePath} (forecasts, history by lead, scores, health)\n`;
  out += `  status page       npx tsx src/cli/main.ts run --config ${configArg} --no-initial-run\n`;
  out += `                    then open http://127.0.0.1:8787/ (the demo data ended in the past, so new cycles would report stale input)\n`;
  out += `  forecasts as CSV  npx tsx src/cli/main.ts export --series tarrow-hill --config ${configArg}\n`;
  return out;
}

export function registerDemo(program: Command, ctx: CliContext = defaultContext()): void {
  program
    .command('demo')
    .description('load the demo data into a fresh embedded store, backtest, replay the daemon over the last days and print a summary')
    .option('-c, --config <file>', 'demo config', 'config/demo.yaml')
    .option('--data <dir>', 'folder of the demo CSV files', 'demo-data')
    .option('--replay-days <n>', 'days of daily cycles replayed before the final one', '21')
    .option('--report <file>', 'backtest report (HTML); default: beside the store')
    .option('--workers <n>', 'worker threads (0 = main thread); default daemon.concurrency')
    .option('--log-level <level>', 'log level of the cycles (logs go to stderr)', 'warn')
    .action(async (opts: DemoOptions) => {
      const loaded = loadConfigForCli(ctx, opts.config);
      if (!loaded) return;
      const workers = workersOption(ctx, opts.workers);
      if (workers === null) return;
      const replayDays = Number(opts.replayDays);
      if (!Number.isInteger(replayDays) || replayDays < 0 || replayDays > 120) {
        ctx.io.err(`USAGE: --replay-days must be an integer from 0 to 120, not "${opts.replayDays}"\n`);
        ctx.fail(EXIT.INVALID);
        return;
      }
      const reportPath = path.resolve(ctx.cwd, opts.report ?? path.join(path.dirname(loaded.config.store.embedded.path), 'backtest-report.html'));
      const res = await runDemo(ctx, loaded, { dataDir: path.resolve(ctx.cwd, opts.data), replayDays, reportPath, ...(workers !== undefined ? { workers } : {}), logLevel: opts.logLevel });
      if (!res) return;
      ctx.io.out(formatDemo(res, opts.config));
      if (res.failedSeries.length) ctx.fail(EXIT.FAILED);
    });
}
