/**
 * `radcast tune --config FILE --series NAME`: backtests every combination of a settings grid
 * (window x centres x width mode, optionally ridge and lag sets) and ranks them.
 *
 *   radcast tune -c config/demo.yaml -s oskaveld-north --windows 4w,8w,16w --centres 16,32,64
 *
 * Grids come from the series' `tune` section; a grid option replaces that dimension. Prints the
 * ranking, the noise statement and a YAML snippet of the best settings; `--write` puts the tuned
 * keys into the series entry of the config file (after a backup), `--json` prints a document for
 * scripts instead, `--report FILE.html` writes the heatmap and error-by-lead page.
 */
import { writeFileSync } from 'node:fs';
import { resolve } from 'node:path';
import type { Command } from 'commander';
import cliProgress from 'cli-progress';
import { parseConfigText, type LoadedConfig } from '../config/load.ts';
import { formatIssue } from '../config/errors.ts';
import { loadSecrets } from '../config/secrets.ts';
import { parseDurationMs, toSteps, type LagSpec } from '../config/duration.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import { openSeriesStore } from '../store/index.ts';
import type { SeriesStore } from '../store/types.ts';
import { historyStepsFor, loadBacktestInputs } from '../evaluate/load-series.ts';
import { buildCandidates, gridFor, tunedKeys, tuneSnippet, type TuneGrid, type WindowSpec } from '../evaluate/tune-grid.ts';
import { formatTuneTable, tune, tuneJson, type TuneProgress, type TuneResult } from '../evaluate/tune.ts';
import { renderTuneReport } from '../evaluate/tune-report.ts';
import type { WidthMode } from '../model/types.ts';
import { parseTimestamp } from './csv.ts';
import { defaultContext, EXIT, loadConfigForCli, type CliContext } from './context.ts';
import { writeTunedConfig } from './tune-write.ts';

export interface TuneCliOptions {
  config: string;
  series?: string;
  windows?: string;
  centres?: string;
  widthModes?: string;
  ridge?: string;
  lagSets?: string;
  seed?: string;
  budget?: string;
  threads?: string;
  span?: string;
  every?: string;
  until?: string;
  top?: string;
  json?: boolean;
  report?: string;
  write?: boolean;
  progress?: boolean;
}

/** What tests (and embedders) can replace. */
export interface TuneCliDeps {
  /** Clock (ms) for the budget and the estimate; default performance.now. */
  now?: () => number;
  openStore?: (loaded: LoadedConfig) => Promise<SeriesStore>;
  /** Show the progress bar (default: stderr is a TTY and --no-progress not given). */
  progress?: boolean;
  /** Time of the backup stamp and the report header. */
  date?: () => Date;
}

type Parsed<T> = { ok: true; value: T } | { ok: false; message: string };

function list(text: string): string[] {
  return text
    .split(',')
    .map((s) => s.trim())
    .filter((s) => s !== '');
}

export function parseWindows(text: string): Parsed<WindowSpec[]> {
  const out: WindowSpec[] = [];
  for (const t of list(text)) {
    if (/^\d+$/.test(t) && Number(t) > 0) out.push(Number(t));
    else if (parseDurationMs(t).ok) out.push(t);
    else return { ok: false, message: `--windows: "${t}" is neither a step count nor a duration (e.g. 4w,8w,16w or 672,1344)` };
  }
  return out.length ? { ok: true, value: out } : { ok: false, message: '--windows: give at least one window' };
}

export function parseCentres(text: string): Parsed<number[]> {
  const out: number[] = [];
  for (const t of list(text)) {
    const n = Number(t);
    if (!/^\d+$/.test(t) || n < 1 || n > 4096) return { ok: false, message: `--centres: "${t}" is not a whole number from 1 to 4096` };
    out.push(n);
  }
  return out.length ? { ok: true, value: out } : { ok: false, message: '--centres: give at least one number of centres' };
}

export function parseWidthModes(text: string): Parsed<WidthMode[]> {
  const out: WidthMode[] = [];
  for (const t of list(text)) {
    if (t !== 'shared' && t !== 'per-centre') return { ok: false, message: `--width-modes: "${t}" is not shared or per-centre` };
    out.push(t);
  }
  return out.length ? { ok: true, value: out } : { ok: false, message: '--width-modes: give shared, per-centre or both' };
}

export function parseRidges(text: string): Parsed<number[]> {
  const out: number[] = [];
  for (const t of list(text)) {
    const n = Number(t);
    if (t === '' || !Number.isFinite(n) || n < 0) return { ok: false, message: `--ridge: "${t}" is not a non-negative number (e.g. 1e-4,1e-3,1e-2)` };
    out.push(n);
  }
  return out.length ? { ok: true, value: out } : { ok: false, message: '--ridge: give at least one penalty' };
}

/** "1-24,168;1-48" -> [["1-24", 168], ["1-48"]]: lag sets separated by ";", lags by ",". */
export function parseLagSets(text: string): Parsed<LagSpec[][]> {
  const sets: LagSpec[][] = [];
  for (const part of text.split(';').map((s) => s.trim()).filter((s) => s !== '')) {
    const lags: LagSpec[] = [];
    for (const t of list(part)) {
      if (/^\d+$/.test(t)) lags.push(Number(t));
      else if (/^\d+\s*-\s*\d+$/.test(t) || parseDurationMs(t).ok) lags.push(t.replace(/\s+/g, ''));
      else return { ok: false, message: `--lag-sets: "${t}" is neither a lag, a range a-b nor a duration (e.g. "1-24,168;1-48")` };
    }
    if (lags.length) sets.push(lags);
  }
  return sets.length ? { ok: true, value: sets } : { ok: false, message: '--lag-sets: give at least one lag set, e.g. "1-24,168;1-48"' };
}

function formatMs(ms: number): string {
  if (!Number.isFinite(ms) || ms < 0) return '?';
  const s = Math.round(ms / 1000);
  if (s < 60) return `${s}s`;
  const m = Math.floor(s / 60);
  if (m < 60) return `${m}m${String(s % 60).padStart(2, '0')}s`;
  return `${Math.floor(m / 60)}h${String(m % 60).padStart(2, '0')}m`;
}

async function defaultOpenStore(ctx: CliContext, loaded: LoadedConfig): Promise<SeriesStore> {
  // Only the store's own secrets matter here; a webhook URL that cannot be read does not stop a tune run.
  const { secrets, issues } = loadSecrets(loaded.config, { env: ctx.env });
  const storeIssue = issues.find((i) => i.path.startsWith('store.'));
  if (storeIssue) throw Object.assign(new Error(formatIssue(storeIssue)), { code: storeIssue.code, hint: storeIssue.hint });
  return openSeriesStore(loaded.config, { secrets });
}

function pickSeries(ctx: CliContext, loaded: LoadedConfig, name: string | undefined): ResolvedSeries | null {
  const all = loaded.series;
  if (name === undefined) {
    if (all.length === 1) return all[0];
    ctx.io.err(`USAGE: --series is needed: the config has ${all.length} series (${all.map((s) => s.name).join(', ')})\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  const r = all.find((s) => s.name === name);
  if (!r) {
    ctx.io.err(`UNKNOWN_SERIES: series "${name}" is not in the config (hint: one of ${all.map((s) => s.name).join(', ')})\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  return r;
}

/** The tune command against a loaded config; returns the result (null after a reported failure). */
export async function runTuneCommand(ctx: CliContext, opts: TuneCliOptions, deps: TuneCliDeps = {}): Promise<TuneResult | null> {
  const usage = (msg: string): null => {
    ctx.io.err(`USAGE: ${msg}\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  };
  const over: Partial<TuneGrid> = {};
  const parsers: Array<[string | undefined, (t: string) => Parsed<unknown>, keyof TuneGrid]> = [
    [opts.windows, parseWindows, 'windows'],
    [opts.centres, parseCentres, 'centres'],
    [opts.widthModes, parseWidthModes, 'widthModes'],
    [opts.ridge, parseRidges, 'ridges'],
    [opts.lagSets, parseLagSets, 'lagSets'],
  ];
  for (const [text, parse, key] of parsers) {
    if (text === undefined) continue;
    const p = parse(text);
    if (!p.ok) return usage(p.message);
    (over as Record<string, unknown>)[key] = p.value;
  }
  const intOpt = (name: string, v: string | undefined, min: number, max: number): number | undefined | null => {
    if (v === undefined) return undefined;
    const n = Number(v);
    if (!/^\d+$/.test(v.trim()) || n < min || n > max) return usage(`${name} must be a whole number from ${min} to ${max}, not "${v}"`);
    return n;
  };
  const seedOpt = intOpt('--seed', opts.seed, 0, 2 ** 31 - 1);
  const threadsOpt = intOpt('--threads', opts.threads, 0, 64);
  const topOpt = intOpt('--top', opts.top, 1, 100_000);
  if (seedOpt === null || threadsOpt === null || topOpt === null) return null;
  let budgetMs: number | undefined;
  if (opts.budget !== undefined) {
    const b = parseDurationMs(opts.budget);
    if (!b.ok) return usage(`--budget: ${b.message} (${b.hint})`);
    budgetMs = b.value;
  }
  let untilMs: number | undefined;
  if (opts.until !== undefined) {
    const t = parseTimestamp(opts.until);
    if (!t.ok) return usage(`--until: ${t.message} (${t.hint})`);
    untilMs = t.ms;
  }

  const loaded = loadConfigForCli(ctx, opts.config);
  if (!loaded) return null;
  const resolved = pickSeries(ctx, loaded, opts.series);
  if (!resolved) return null;
  const entry = loaded.config.series[resolved.index];
  const stepMs = resolved.settings.stepMs;
  const stepsOpt = (name: string, v: string | undefined, fallback: number): number | null => {
    if (v === undefined) return fallback;
    const r = toSteps(/^\d+$/.test(v) ? Number(v) : v, stepMs, name);
    if (!r.ok || r.value < 1) return usage(`${name}: ${r.ok ? 'must be at least one step' : `${r.message} (${r.hint})`}`);
    return r.value;
  };
  const spanSteps = stepsOpt('--span', opts.span, resolved.backtest.spanSteps);
  const everySteps = stepsOpt('--every', opts.every, resolved.backtest.everySteps);
  if (spanSteps === null || everySteps === null) return null;
  if (untilMs !== undefined) untilMs = Math.floor(untilMs / stepMs) * stepMs;

  const grid = gridFor(entry, over);
  const seed = seedOpt ?? entry.fit.seed;
  const { candidates, rejected, total } = buildCandidates(loaded.config, resolved.index, grid, { seed });
  if (candidates.length === 0) {
    ctx.io.err(`NO_COMBINATION: none of the ${total} combinations of the grid is a valid config for ${resolved.name}\n`);
    for (const r of rejected.slice(0, 10)) ctx.io.err(`  ${r.label}: ${r.code} ${r.message} (hint: ${r.hint})\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }

  const store = await (deps.openStore ?? ((l: LoadedConfig) => defaultOpenStore(ctx, l)))(loaded);
  let inputs;
  try {
    const historySteps = historyStepsFor(resolved, spanSteps, { windowSteps: candidates.map((c) => c.windowSteps), configured: loaded.series });
    inputs = await loadBacktestInputs(store, resolved, { historySteps, configured: loaded.series, ...(untilMs !== undefined ? { toMs: untilMs } : {}) });
  } finally {
    await store.close();
  }

  const showBar = deps.progress ?? (opts.progress !== false && process.stderr.isTTY === true);
  let bar: cliProgress.SingleBar | null = null;
  const onProgress = (p: TuneProgress) => {
    if (!showBar) return;
    const payload = {
      combos: `${p.candidatesDone}/${p.candidatesTotal} settings`,
      // Not "eta": cli-progress fills its own {eta} from the bar's rate, which would hide this one.
      left: p.etaMs === null ? 'estimating time left' : `${formatMs(p.etaMs)} left`,
      budget: p.budgetLeftMs === null ? '' : ` | budget ${formatMs(p.budgetLeftMs)}`,
    };
    if (!bar) {
      bar = new cliProgress.SingleBar(
        { format: 'tune {bar} {percentage}% | {combos} | {value}/{total} origins | {left}{budget}', stream: process.stderr, hideCursor: true, clearOnComplete: true, fps: 5 },
        cliProgress.Presets.shades_classic,
      );
      bar.start(p.originsTotal, p.originsDone, payload);
    } else bar.update(p.originsDone, payload);
  };
  let result: TuneResult;
  try {
    result = await tune(inputs.target, inputs.exo, candidates, {
      spanSteps,
      everySteps,
      seed,
      ...(threadsOpt !== undefined ? { threads: threadsOpt } : {}),
      ...(budgetMs !== undefined ? { budgetMs } : {}),
      ...(deps.now ? { now: deps.now } : {}),
      exoSettings: inputs.exoSettings,
      rejected,
      gridSize: total,
      series: resolved.name,
      onProgress,
    });
  } finally {
    (bar as cliProgress.SingleBar | null)?.stop();
  }

  const best = result.ranking[0];
  const keys = best ? tunedKeys(best.values, resolved, grid) : null;
  const header = best
    ? `radcast tune ${resolved.name}: best of ${result.ranking.length} settings, MASE ${best.score.model.mase?.toFixed(3) ?? '–'} on ${result.origins} origins (seed ${seed})`
    : undefined;
  const snippet = keys ? tuneSnippet(keys.all, header) : '';
  let written: Record<string, unknown> | null = null;
  let writeFailed = false;
  if (opts.write && keys && loaded.file) {
    if (keys.changed.length === 0) {
      written = { file: loaded.file, backup: null, changed: [] };
    } else {
      const file = loaded.file;
      const w = writeTunedConfig(
        file,
        resolved.index,
        keys.changed.map((c) => ({ key: c.key, value: c.value })),
        {
          ...(deps.date ? { now: deps.date() } : {}),
          validate: (text) => {
            const r = parseConfigText(text, { file });
            return r.ok ? null : r.issues.map(formatIssue).join('; ');
          },
        },
      );
      if (w.ok) written = { file, backup: w.backup, changed: keys.changed.map((c) => ({ key: c.key, from: c.from, to: c.value })) };
      else {
        writeFailed = true;
        ctx.io.err(`${w.code}: ${w.message} (hint: ${w.hint})\n`);
        ctx.fail(EXIT.FAILED);
      }
    }
  }
  if (opts.report) {
    const html = renderTuneReport(result, { generatedAt: deps.date?.() ?? new Date(), timeZone: resolved.settings.features.timeZone, ...(snippet ? { snippet } : {}) });
    writeFileSync(resolve(ctx.cwd, opts.report), html);
    if (!opts.json) ctx.io.err(`wrote report ${opts.report}\n`);
  }

  if (opts.json) {
    const bestJson = best && keys ? { id: best.id, label: best.label, settings: Object.fromEntries(keys.all.map((c) => [c.key, c.value])), changes: keys.changed.map((c) => ({ key: c.key, from: c.from, to: c.value })) } : undefined;
    ctx.io.out(JSON.stringify(tuneJson(result, { ...(bestJson ? { best: bestJson } : {}), snippet, written }), null, 2) + '\n');
  } else {
    ctx.io.out(`tune ${resolved.name}: ${result.ranking.length} settings ranked in ${formatMs(result.elapsedMs)} (${result.threads > 0 ? `${result.threads} threads over settings` : result.originWorkers > 0 ? `${result.originWorkers} workers over origins` : 'in the main thread'}, seed ${seed})\n\n`);
    ctx.io.out(formatTuneTable(result, { ...(topOpt !== undefined ? { top: topOpt } : {}) }));
    if (best && keys) {
      ctx.io.out(`\nBest settings for the entry of ${resolved.name} (paste under "- name: ${resolved.name}"${keys.changed.length ? '' : '; the config already has them'}):\n\n`);
      ctx.io.out(snippet.split('\n').map((l) => (l ? `    ${l}` : l)).join('\n'));
      if (written && !writeFailed) {
        const ch = written.changed as unknown[];
        ctx.io.out(ch.length ? `\nwrote ${ch.length} key(s) to ${String(written.file)} (backup ${String(written.backup)})\n` : `\nnothing written: ${String(written.file)} already has these settings\n`);
      }
    }
  }
  if (!best) {
    ctx.io.err(`NO_RESULT: no combination could be scored${result.failed[0] ? ` (first failure: ${result.failed[0].code} ${result.failed[0].message})` : ''}\n`);
    ctx.fail(EXIT.FAILED);
  }
  return result;
}

export function registerTune(program: Command, ctx: CliContext = defaultContext(), deps: TuneCliDeps = {}): void {
  program
    .command('tune')
    .description('backtest every combination of a settings grid (window, centres, width mode, ridge, lags) and rank them')
    .requiredOption('-c, --config <file>', 'config file (YAML)')
    .option('-s, --series <name>', 'series to tune (needed when the config has more than one)')
    .option('--windows <list>', 'training windows, e.g. 4w,8w,16w,52w (default: the series tune.windows)')
    .option('--centres <list>', 'numbers of centres K, e.g. 8,16,32,64,128')
    .option('--width-modes <list>', 'shared, per-centre or both')
    .option('--ridge <list>', 'relative ridge penalties, e.g. 1e-4,1e-3,1e-2 (default: keep the series ridge)')
    .option('--lag-sets <sets>', 'lag lists separated by ";", e.g. "1-24,168;1-48" (default: keep the series lags)')
    .option('--span <steps|duration>', 'backtest origins over this last span (default: backtest.span)')
    .option('--every <steps|duration>', 'spacing of the origins (default: backtest.every)')
    .option('--until <time>', 'end of the data used (RFC 3339 or epoch); default: after the newest reading')
    .option('--seed <n>', 'fit seed of every combination and of their start order (default: fit.seed)')
    .option('--budget <duration>', 'start no new combination after this long, e.g. 10m; report what has finished')
    .option('--threads <n>', 'threads running combinations side by side (0 = all in the main thread); default: one per core when there are at least that many combinations and 60 fits')
    .option('--top <n>', 'rows of the ranking to print (default 15)')
    .option('--json', 'print a JSON document instead of the table')
    .option('--report <file.html>', 'write an HTML report (MASE heatmap over window x K, error by lead of the top settings)')
    .option('--write', 'write the best settings into the series entry of the config file (backup first)')
    .option('--no-progress', 'no progress bar (it is shown only when stderr is a terminal)')
    .action(async (opts: TuneCliOptions) => {
      await runTuneCommand(ctx, opts, deps);
    });
}
