/**
 * The tuner: every combination of a settings grid runs the rolling-origin backtest of
 * `radcast backtest` (src/evaluate/backtest.ts) on the same origins, and the combinations are
 * ranked by MASE on one common yardstick (see tune-task.ts).
 *
 * Parallelism (two cores on the reference machine): combinations run side by side on tune worker
 * threads, each backtest inline in its thread (no nested pools, one pool for the whole run), when
 * there are at least as many combinations as cores and enough fits to pay for starting the
 * workers; small runs stay in the calling thread. Spreading the origins of each combination over
 * the backtest's own workers is available (originWorkers) but was slower in every measurement.
 * bench/cases/tune.ts compares the three; results never depend on the choice.
 *
 * Noise rule: for every setting s and the best b, the per-origin MASE differences
 * d_o = MASE_s(o) - MASE_b(o) over the origins both scored are paired; with their mean d̄, sample
 * standard deviation s_d and n_eff = n * min(1, every / horizon) (origins closer than the horizon
 * share target steps, so they count as fewer independent ones), s is within the noise of the
 * backtest when d̄ <= 2 * s_d / sqrt(n_eff), i.e. less than two standard errors from the best.
 *
 * Deterministic for a given seed: the seed is every combination's fit seed and the order in which
 * combinations start (a seeded shuffle, so a run cut short by its budget has sampled the whole
 * grid, not only its first windows). Finished combinations do not depend on order or threads.
 *
 * Budget: no new combination starts once `budgetMs` has passed on the injected clock; the ones
 * running finish and the result lists the ones not started.
 */
import { MessageChannel } from 'node:worker_threads';
import { availableParallelism } from 'node:os';
import { Piscina } from 'piscina';
import type { RegularSeries } from '../series/types.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import { ForecastError, isoAt } from '../forecast/errors.ts';
import { mulberry32 } from '../model/random.ts';
import { backtest, backtestOrigins, formatStep, modelForecasts } from './backtest.ts';
import { runTuneTask, type CandidateOutcome, type CandidateScore, type LeadScore, type MethodSummary, type TuneTask, type TuneTaskProgress } from './tune-task.ts';
import type { CandidateValues, RejectedCandidate, TuneCandidate } from './tune-grid.ts';

const WORKER_FILE = new URL('./tune-worker.mjs', import.meta.url).href;

/** A setting is within the noise when its mean paired MASE difference to the best is below this many standard errors. */
export const NOISE_SE_MULTIPLE = 2;
/** Fewer paired origins than this: no noise statement for that pair. */
export const NOISE_MIN_ORIGINS = 3;

export interface TuneProgress {
  candidatesDone: number;
  candidatesTotal: number;
  running: number;
  originsDone: number;
  originsTotal: number;
  elapsedMs: number;
  /** Estimated time left (ms) at the rate so far; null before the first origin. */
  etaMs: number | null;
  /** Budget left (ms), null without a budget. */
  budgetLeftMs: number | null;
}

export interface TuneOptions {
  /** Origins lie in the last spanSteps steps (as BacktestOptions.spanSteps). */
  spanSteps: number;
  everySteps: number;
  /**
   * Threads running combinations side by side (each backtest inline in its thread); 0 = one after
   * another in the calling thread. Default: see defaultTuneParallelism.
   */
  threads?: number;
  /** Worker threads of each backtest's origins when threads is 0 (default 0). */
  originWorkers?: number;
  /** Seed of the start order (the fit seed is set in the candidates, see buildCandidates). */
  seed?: number;
  /** Start no combination after this much time (ms on `now`). */
  budgetMs?: number;
  /** Clock (ms) for the budget, elapsed time and the estimate; default performance.now. */
  now?: () => number;
  chainLength?: number;
  exoSettings?: Record<string, ForecastSettings>;
  /** Forecast the inputs given in exoSettings once for all combinations (default true; false = inside every backtest). */
  shareInputForecasts?: boolean;
  onProgress?: (p: TuneProgress) => void;
  /** Called when a combination has finished (after its progress). */
  onCandidate?: (c: { candidate: TuneCandidate; outcome: CandidateOutcome }) => void;
  signal?: AbortSignal;
  /** Combinations the config refused (shown in the result). */
  rejected?: RejectedCandidate[];
  /** Series name for errors when no candidate is left. */
  series?: string;
  /** Size of the whole grid, rejected combinations included (default candidates + rejected). */
  gridSize?: number;
}

export interface VsBest {
  /** Paired origins. */
  n: number;
  /** Mean of MASE(this) - MASE(best) over them. */
  meanDiff: number;
  /** Its standard error with n_eff (see the noise rule). */
  se: number;
  /** null: too few paired origins to tell. */
  withinNoise: boolean | null;
}

export interface RankedEntry {
  rank: number;
  id: number;
  label: string;
  values: CandidateValues;
  windowSteps: number;
  score: CandidateScore;
  /** 1 - MASE(model) / MASE(baseline) on the same origins: 0.25 = a quarter less error than the baseline. */
  gain: Record<string, number | null>;
  /** Comparison with the best (null for the best itself). */
  vsBest: VsBest | null;
}

export interface TuneResult {
  series: string;
  stepMs: number;
  horizon: number;
  season: number;
  quantiles: number[];
  /** Span and spacing actually used (the span may be shortened so every window has the same origins). */
  spanSteps: number;
  everySteps: number;
  requestedSpanSteps: number;
  /** Origins every combination was asked to score. */
  origins: number;
  originTimes: number[];
  /** Window of the common MASE scale before each origin. */
  scaleWindowSteps: number;
  seed: number;
  threads: number;
  originWorkers: number;
  elapsedMs: number;
  budgetMs: number | null;
  stoppedByBudget: boolean;
  gridSize: number;
  ranking: RankedEntry[];
  failed: Array<{ id: number; label: string; values: CandidateValues; code: string; message: string; hint: string }>;
  notStarted: Array<{ id: number; label: string; values: CandidateValues }>;
  /** Refused by the config, or dropped for too little history. */
  skipped: Array<{ label: string; values: CandidateValues; code: string; message: string; hint: string }>;
  /** Inputs forecast once for all combinations, with the number of the run's origins their forecasts cover. */
  sharedInputs: Record<string, number>;
  noise: {
    rule: string;
    /** Ids of the settings within the noise of the best (the best not included). */
    withinNoise: number[];
    /** Among the best and those within its noise: the one with the lowest mean fit time per refit. */
    cheapestWithinNoise: number | null;
  };
}

/** Below this many fits (combinations x origins) a run stays in the calling thread: starting workers costs more. */
export const MIN_FITS_FOR_THREADS = 60;

/**
 * Combination threads and origin workers when the caller does not say: one thread per core over
 * the combinations when there are at least as many combinations as cores and enough fits to pay
 * for the workers' start-up, else everything in the calling thread. Spreading each combination's
 * origins over workers instead was slower in every measurement (bench/cases/tune.ts: a pool per
 * combination, and uneven chains), so it is used only when asked for.
 */
export function defaultTuneParallelism(nCandidates: number, nOrigins: number, cores = availableParallelism()): { threads: number; originWorkers: number } {
  if (cores > 1 && nCandidates >= cores && nCandidates * nOrigins >= MIN_FITS_FOR_THREADS) return { threads: cores, originWorkers: 0 };
  return { threads: 0, originWorkers: 0 };
}

/** Seeded Fisher–Yates shuffle (common practice). */
export function shuffled<T>(xs: readonly T[], seed: number): T[] {
  const out = [...xs];
  const rnd = mulberry32(seed);
  for (let i = out.length - 1; i > 0; i--) {
    const j = Math.floor(rnd() * (i + 1));
    [out[i], out[j]] = [out[j], out[i]];
  }
  return out;
}

/**
 * The paired comparison of the noise rule. `a` and `b` are per-origin MASE keyed by origin time.
 * Returns the mean of a - b, its standard error with n_eff = n * min(1, every / horizon), and n.
 */
export function pairedDifference(a: ReadonlyMap<number, number>, b: ReadonlyMap<number, number>, everySteps: number, horizon: number): { n: number; mean: number; sd: number; se: number } {
  const d: number[] = [];
  for (const [t, x] of a) {
    const y = b.get(t);
    if (y !== undefined && Number.isFinite(x) && Number.isFinite(y)) d.push(x - y);
  }
  const n = d.length;
  if (n === 0) return { n, mean: Number.NaN, sd: Number.NaN, se: Number.NaN };
  const mean = d.reduce((s, x) => s + x, 0) / n;
  // sample standard deviation: sqrt(sum (d - mean)^2 / (n - 1))
  const sd = n > 1 ? Math.sqrt(d.reduce((s, x) => s + (x - mean) ** 2, 0) / (n - 1)) : Number.NaN;
  const nEff = n * Math.min(1, everySteps / horizon);
  return { n, mean, sd, se: sd / Math.sqrt(nEff) };
}

function maseMap(s: CandidateScore): Map<number, number> {
  const m = new Map<number, number>();
  s.originTimes.forEach((t, i) => {
    const v = s.maseByOrigin[i];
    if (v !== null && Number.isFinite(v)) m.set(t, v);
  });
  return m;
}

const byMase = (a: { score: CandidateScore; id: number }, b: { score: CandidateScore; id: number }): number => {
  const ma = a.score.model.mase ?? Infinity;
  const mb = b.score.model.mase ?? Infinity;
  if (ma !== mb) return ma - mb;
  const ra = a.score.model.rmse ?? Infinity;
  const rb = b.score.model.rmse ?? Infinity;
  if (ra !== rb) return ra - rb;
  return a.id - b.id;
};

/** Ranks finished combinations and applies the noise rule. */
export function rankCandidates(done: ReadonlyArray<{ candidate: TuneCandidate; score: CandidateScore }>, everySteps: number, horizon: number): { ranking: RankedEntry[]; withinNoise: number[]; cheapestWithinNoise: number | null } {
  const sorted = done.map((d) => ({ ...d, id: d.candidate.id })).sort(byMase);
  const best = sorted[0];
  const bestMap = best ? maseMap(best.score) : new Map<number, number>();
  const ranking: RankedEntry[] = sorted.map((d, i) => {
    const gain: Record<string, number | null> = {};
    for (const [name, b] of Object.entries(d.score.baselines)) {
      const mm = d.score.model.mase;
      gain[name] = mm !== null && b.mase !== null && b.mase > 0 ? 1 - mm / b.mase : null;
    }
    let vsBest: VsBest | null = null;
    if (i > 0) {
      const p = pairedDifference(maseMap(d.score), bestMap, everySteps, horizon);
      const judged = p.n >= NOISE_MIN_ORIGINS && Number.isFinite(p.se);
      vsBest = { n: p.n, meanDiff: p.mean, se: p.se, withinNoise: judged ? p.mean <= NOISE_SE_MULTIPLE * p.se : null };
    }
    return { rank: i + 1, id: d.id, label: d.candidate.label, values: d.candidate.values, windowSteps: d.candidate.windowSteps, score: d.score, gain, vsBest };
  });
  const withinNoise = ranking.filter((r) => r.vsBest?.withinNoise === true).map((r) => r.id);
  let cheapest: number | null = null;
  if (best) {
    const group = ranking.filter((r) => r.rank === 1 || r.vsBest?.withinNoise === true);
    group.sort((a, b) => a.score.fit.meanMs - b.score.fit.meanMs || a.values.centres - b.values.centres || a.rank - b.rank);
    cheapest = group[0].id;
  }
  return { ranking, withinNoise, cheapestWithinNoise: cheapest };
}

export const NOISE_RULE_TEXT = `within the noise: mean paired difference of per-origin MASE to the best <= ${NOISE_SE_MULTIPLE} standard errors (n_eff = origins x min(1, every / horizon); at least ${NOISE_MIN_ORIGINS} paired origins)`;

/** Origins shared by every window; drops windows that would lose more than half of them. */
function planOrigins(target: RegularSeries, candidates: readonly TuneCandidate[], spanSteps: number, everySteps: number): { spanSteps: number; origins: number[]; scaleWindowSteps: number; tooShort: Set<number> } {
  const windows = [...new Set(candidates.map((c) => c.windowSteps))].sort((a, b) => a - b);
  const sample = candidates[0].settings;
  const originsFor = (w: number) => backtestOrigins(target, { ...sample, windowSteps: w }, spanSteps, everySteps).origins;
  const full = originsFor(windows[0]);
  const need = Math.max(NOISE_MIN_ORIGINS, Math.ceil(full.length / 2));
  const tooShort = new Set(windows.filter((w) => originsFor(w).length < need));
  const kept = windows.filter((w) => !tooShort.has(w));
  if (kept.length === 0) return { spanSteps, origins: full, scaleWindowSteps: windows[0], tooShort };
  const longest = kept[kept.length - 1];
  const origins = originsFor(longest);
  let last = target.values.length - 1;
  while (last >= 0 && !Number.isFinite(target.values[last])) last--;
  // With span = last - first origin every window gets exactly these origins.
  const span = origins.length ? last - origins[0] : spanSteps;
  return { spanSteps: Math.min(spanSteps, span), origins, scaleWindowSteps: longest, tooShort };
}

/** Runs every candidate's backtest and ranks them. */
export async function tune(target: RegularSeries, exo: Record<string, RegularSeries>, candidates: readonly TuneCandidate[], opts: TuneOptions): Promise<TuneResult> {
  const now = opts.now ?? (() => performance.now());
  const t0 = now();
  const seed = opts.seed ?? 1;
  const skipped: TuneResult['skipped'] = (opts.rejected ?? []).map((r) => ({ label: r.label, values: r.values, code: r.code, message: r.message, hint: r.hint }));
  if (candidates.length === 0) {
    throw new ForecastError({
      code: 'BAD_SETTINGS',
      series: opts.series ?? '(unnamed)',
      message: `no combination of the grid is usable${skipped.length ? `: ${skipped.length} refused by the config (first: ${skipped[0].label}: ${skipped[0].message})` : ''}`,
      hint: skipped[0]?.hint ?? 'give at least one window, one number of centres and one width mode',
    });
  }
  const s0 = candidates[0].settings;
  const series = s0.series;
  const H = s0.features.horizon;
  const plan = planOrigins(target, candidates, opts.spanSteps, opts.everySteps);
  for (const c of candidates) {
    if (plan.tooShort.has(c.windowSteps)) {
      skipped.push({
        label: c.label,
        values: c.values,
        code: 'TOO_LITTLE_HISTORY',
        message: `window of ${c.windowSteps} steps leaves fewer than half of the backtest origins`,
        hint: `load ${formatStep(Math.max(1, c.windowSteps - plan.scaleWindowSteps) * s0.stepMs)} more history, or drop this window from the grid`,
      });
    }
  }
  const runnable = candidates.filter((c) => !plan.tooShort.has(c.windowSteps));
  if (runnable.length === 0 || plan.origins.length === 0) {
    throw new ForecastError({
      code: 'NO_ORIGINS',
      series,
      message: `no window of the grid has a full training window before ${NOISE_MIN_ORIGINS} or more backtest origins (series has ${target.values.length} steps)`,
      hint: 'load more history, try shorter windows, or lengthen backtest.span',
    });
  }
  const par = defaultTuneParallelism(runnable.length, plan.origins.length);
  const threads = Math.max(0, Math.floor(opts.threads ?? par.threads));
  const originWorkers = threads > 0 ? 0 : Math.max(0, Math.floor(opts.originWorkers ?? par.originWorkers));
  // Inputs used at target time that are configured series are forecast at every origin with their
  // own settings; those forecasts do not depend on the tuned settings, so they are made once here
  // (the same chains as inside each backtest, so the numbers are the same) instead of per combination.
  const exoForecasts: Record<string, Record<string, number[]>> = {};
  const sharedInputs: Record<string, number> = {};
  for (const spec of s0.features.exogenous) {
    const es = opts.exoSettings?.[spec.name];
    const ex = exo[spec.name];
    if (opts.shareInputForecasts === false || !spec.atTarget || !es || !ex || es.features.exogenous.length > 0 || es.features.horizon < H || es.stepMs !== s0.stepMs) continue;
    try {
      const r = await backtest(ex, {}, { ...es, features: { ...es.features, horizon: H } }, {
        spanSteps: plan.spanSteps,
        everySteps: opts.everySteps,
        workers: threads > 0 ? threads : originWorkers,
        ...(opts.chainLength !== undefined ? { chainLength: opts.chainLength } : {}),
        ...(opts.signal ? { signal: opts.signal } : {}),
      });
      exoForecasts[spec.name] = modelForecasts(r);
      sharedInputs[spec.name] = plan.origins.filter((o) => String(target.startMs + o * target.stepMs) in exoForecasts[spec.name]).length;
    } catch {
      // Each combination then forecasts the input itself, origin by origin.
    }
  }
  const order = shuffled(runnable, seed);
  const perCandidate = plan.origins.length;
  const originsTotal = perCandidate * order.length;
  const progressOf = new Map<number, number>();
  let finishedOrigins = 0;
  let candidatesDone = 0;
  let running = 0;
  const budgetLeft = () => (opts.budgetMs === undefined ? null : Math.max(0, opts.budgetMs - (now() - t0)));
  const report = () => {
    if (!opts.onProgress) return;
    let originsDone = finishedOrigins;
    for (const v of progressOf.values()) originsDone += v;
    const elapsedMs = now() - t0;
    const etaMs = originsDone > 0 ? (elapsedMs / originsDone) * (originsTotal - originsDone) : null;
    opts.onProgress({ candidatesDone, candidatesTotal: order.length, running, originsDone, originsTotal, elapsedMs, etaMs, budgetLeftMs: budgetLeft() });
  };

  const taskOf = (c: TuneCandidate): TuneTask => ({
    id: c.id,
    target,
    exo,
    settings: c.settings,
    ...(opts.exoSettings ? { exoSettings: opts.exoSettings } : {}),
    ...(Object.keys(exoForecasts).length ? { exoForecasts } : {}),
    spanSteps: plan.spanSteps,
    everySteps: opts.everySteps,
    scaleWindowSteps: plan.scaleWindowSteps,
    ...(opts.chainLength !== undefined ? { chainLength: opts.chainLength } : {}),
    originWorkers,
  });
  const onTaskProgress = (p: TuneTaskProgress) => {
    progressOf.set(p.id, p.done);
    report();
  };

  const pool = threads > 0 ? new Piscina({ filename: WORKER_FILE, maxThreads: threads, minThreads: 0, idleTimeout: 1000, execArgv: [] }) : null;
  const runOne = async (c: TuneCandidate): Promise<CandidateOutcome> => {
    if (!pool) return runTuneTask(taskOf(c), onTaskProgress);
    const { port1, port2 } = new MessageChannel();
    port1.on('message', onTaskProgress);
    try {
      return (await pool.run({ task: taskOf(c), port: port2 }, { transferList: [port2], ...(opts.signal ? { signal: opts.signal } : {}) })) as CandidateOutcome;
    } catch (err) {
      if (opts.signal?.aborted) throw err;
      return { id: c.id, ok: false, code: 'WORKER_FAILED', message: `tune worker failed: ${(err as Error).message}`, hint: 'run with --threads 0 to see the failure in the main thread' };
    } finally {
      port1.close();
    }
  };

  const outcomes = new Map<number, CandidateOutcome>();
  const notStarted: TuneResult['notStarted'] = [];
  let stoppedByBudget = false;
  let next = 0;
  report();
  try {
    const lane = async (): Promise<void> => {
      while (next < order.length) {
        if (opts.signal?.aborted) throw new ForecastError({ code: 'WORKER_FAILED', series, message: 'tune aborted', hint: 'the caller cancelled the run' });
        if (opts.budgetMs !== undefined && now() - t0 >= opts.budgetMs) {
          stoppedByBudget = true;
          while (next < order.length) {
            const c = order[next++];
            notStarted.push({ id: c.id, label: c.label, values: c.values });
          }
          return;
        }
        const c = order[next++];
        running++;
        progressOf.set(c.id, 0);
        const outcome = await runOne(c);
        running--;
        progressOf.delete(c.id);
        finishedOrigins += perCandidate;
        candidatesDone++;
        outcomes.set(c.id, outcome);
        report();
        opts.onCandidate?.({ candidate: c, outcome });
      }
    };
    await Promise.all(Array.from({ length: Math.max(1, threads) }, lane));
  } finally {
    await pool?.destroy();
  }

  const done: Array<{ candidate: TuneCandidate; score: CandidateScore }> = [];
  const failed: TuneResult['failed'] = [];
  for (const c of runnable) {
    const o = outcomes.get(c.id);
    if (!o) continue;
    if (o.ok && o.origins > 0) done.push({ candidate: c, score: o });
    else if (o.ok) failed.push({ id: c.id, label: c.label, values: c.values, code: o.failedOrigins[0]?.code ?? 'NO_ORIGINS', message: `every origin failed${o.failedOrigins[0] ? `: ${o.failedOrigins[0].message}` : ''}`, hint: 'see radcast backtest for this setting' });
    else failed.push({ id: c.id, label: c.label, values: c.values, code: o.code, message: o.message, hint: o.hint });
  }
  notStarted.sort((a, b) => a.id - b.id);
  const ranked = rankCandidates(done, opts.everySteps, H);
  return {
    series,
    stepMs: s0.stepMs,
    horizon: H,
    season: s0.features.seasonSteps,
    quantiles: [...s0.quantiles].sort((a, b) => a - b),
    spanSteps: plan.spanSteps,
    everySteps: opts.everySteps,
    requestedSpanSteps: opts.spanSteps,
    origins: plan.origins.length,
    originTimes: plan.origins.map((o) => target.startMs + o * target.stepMs),
    scaleWindowSteps: plan.scaleWindowSteps,
    seed,
    threads,
    originWorkers,
    elapsedMs: now() - t0,
    budgetMs: opts.budgetMs ?? null,
    stoppedByBudget,
    gridSize: opts.gridSize ?? candidates.length + (opts.rejected?.length ?? 0),
    ranking: ranked.ranking,
    failed,
    notStarted,
    skipped,
    sharedInputs,
    noise: { rule: NOISE_RULE_TEXT, withinNoise: ranked.withinNoise, cheapestWithinNoise: ranked.cheapestWithinNoise },
  };
}

// ---------- output ----------

const fin = (v: number | null | undefined): number | null => (v === null || v === undefined || !Number.isFinite(v) ? null : v);

function methodJson(m: MethodSummary): Record<string, number | null> {
  return { mase: fin(m.mase), mae: fin(m.mae), rmse: fin(m.rmse), bias: fin(m.bias), coverage: fin(m.coverage), nominalCoverage: fin(m.nominalCoverage), width: fin(m.width), n: m.n };
}

const leadJson = (l: LeadScore[]) => l.map((x, h) => ({ lead: h + 1, mase: fin(x.mase), mae: fin(x.mae), rmse: fin(x.rmse) }));

/** The `--json` document (version 1). */
export function tuneJson(r: TuneResult, extra: { best?: Record<string, unknown>; snippet?: string; written?: Record<string, unknown> | null } = {}): Record<string, unknown> {
  return {
    version: 1,
    series: r.series,
    step: formatStep(r.stepMs),
    stepMs: r.stepMs,
    horizon: r.horizon,
    season: r.season,
    quantiles: r.quantiles,
    spanSteps: r.spanSteps,
    requestedSpanSteps: r.requestedSpanSteps,
    everySteps: r.everySteps,
    origins: r.origins,
    originTimes: r.originTimes.map(isoAt),
    scaleWindowSteps: r.scaleWindowSteps,
    sharedInputs: r.sharedInputs,
    seed: r.seed,
    threads: r.threads,
    originWorkers: r.originWorkers,
    elapsedMs: Math.round(r.elapsedMs),
    budgetMs: r.budgetMs,
    stoppedByBudget: r.stoppedByBudget,
    combinations: { grid: r.gridSize, ranked: r.ranking.length, failed: r.failed.length, notStarted: r.notStarted.length, skipped: r.skipped.length },
    ranking: r.ranking.map((e) => ({
      rank: e.rank,
      id: e.id,
      label: e.label,
      settings: { ...e.values, windowSteps: e.windowSteps },
      mase: fin(e.score.model.mase),
      rmse: fin(e.score.model.rmse),
      mae: fin(e.score.model.mae),
      bias: fin(e.score.model.bias),
      coverage: fin(e.score.model.coverage),
      nominalCoverage: fin(e.score.model.nominalCoverage),
      fitMsPerRefit: fin(e.score.fit.meanMs),
      fitMsMedian: fin(e.score.fit.medianMs),
      origins: e.score.origins,
      failedOrigins: e.score.failedOrigins.length,
      gain: Object.fromEntries(Object.entries(e.gain).map(([k, v]) => [k, fin(v)])),
      baselines: Object.fromEntries(Object.entries(e.score.baselines).map(([k, b]) => [k, { ...methodJson(b), m: b.m }])),
      vsBest: e.vsBest ? { n: e.vsBest.n, meanDiff: fin(e.vsBest.meanDiff), se: fin(e.vsBest.se), withinNoise: e.vsBest.withinNoise } : null,
      maseByLead: leadJson(e.score.byLead).map((x) => x.mase),
      maseByOrigin: e.score.originTimes.map((t, i) => ({ at: isoAt(t), mase: fin(e.score.maseByOrigin[i]) })),
    })),
    noise: r.noise,
    failed: r.failed,
    notStarted: r.notStarted,
    skipped: r.skipped,
    ...(extra.best ? { best: extra.best } : {}),
    ...(extra.snippet !== undefined ? { snippet: extra.snippet } : {}),
    ...(extra.written !== undefined ? { written: extra.written } : {}),
  };
}

/** A number with `digits` decimals, '–' when missing. */
export function num(v: number | null | undefined, digits = 3): string {
  if (v === null || v === undefined || !Number.isFinite(v)) return '–';
  return v.toFixed(digits);
}

/**
 * Header and cells of the ranking table (top `top` rows) for the terminal ('text': short labels)
 * or the HTML report ('html': spelled-out labels); `firstScore` is the index of the MASE column.
 */
export function rankingCells(r: TuneResult, top: number, style: 'text' | 'html'): { head: string[]; rows: string[][]; firstScore: number } {
  const html = style === 'html';
  const showRidge = r.ranking.some((e) => e.values.ridge !== undefined);
  const showLags = r.ranking.some((e) => e.values.lags !== undefined);
  const settings = ['#', 'window', 'K', 'width', ...(showRidge ? ['ridge'] : []), ...(showLags ? ['lags'] : [])];
  const head = [
    ...settings,
    html ? `MASE (m=${r.season})` : `MASE(m=${r.season})`,
    html ? 'vs best ± SE' : 'vs best',
    'RMSE',
    html ? 'coverage' : 'cover',
    html ? 'fit ms / refit' : 'fit ms',
    html ? 'gain vs day' : 'gain/day',
    html ? 'gain vs week' : 'gain/week',
    '',
  ];
  const gap = html ? ' ' : '';
  const pct = (v: number | null | undefined): string => (v === null || v === undefined || !Number.isFinite(v) ? '–' : `${v >= 0 ? '+' : ''}${(100 * v).toFixed(1)}${gap}%`);
  const rows = r.ranking.slice(0, top).map((e) => {
    const vb = e.vsBest;
    return [
      String(e.rank),
      String(e.values.window),
      String(e.values.centres),
      e.values.widthMode,
      ...(showRidge ? [String(e.values.ridge ?? '')] : []),
      ...(showLags ? [e.values.lags ? e.values.lags.map(String).join(',') : ''] : []),
      num(e.score.model.mase),
      vb ? `${vb.meanDiff >= 0 ? '+' : ''}${num(vb.meanDiff)}${gap}±${gap}${num(vb.se)}` : '',
      num(e.score.model.rmse, 2),
      num(e.score.model.coverage, 2),
      num(e.score.fit.meanMs, 0),
      pct(e.gain['seasonal-naive-daily']),
      pct(e.gain['seasonal-naive-weekly']),
      e.rank === 1 ? 'best' : vb?.withinNoise ? (html ? '≈ best (within noise)' : '≈ best') : '',
    ];
  });
  return { head, rows, firstScore: settings.length };
}

/** Text table of the ranking (top `top` rows), with the noise statement under it. */
export function formatTuneTable(r: TuneResult, opts: { top?: number } = {}): string {
  const top = opts.top ?? 15;
  const { head, rows, firstScore } = rankingCells(r, top, 'text');
  const widths = head.map((h, i) => Math.max(h.length, ...rows.map((row) => row[i].length)));
  const right = new Set(head.map((_, i) => i).filter((i) => i === 0 || i >= firstScore));
  right.delete(head.length - 1);
  const line = (cells: string[]) => cells.map((c, i) => (right.has(i) ? c.padStart(widths[i]) : c.padEnd(widths[i]))).join('  ').trimEnd();
  const out = [line(head), ...rows.map(line)];
  if (r.ranking.length > top) out.push(`… ${r.ranking.length - top} more (--top N, --json)`);
  const nominal = r.ranking[0]?.score.model.nominalCoverage;
  out.push('');
  out.push(
    `${r.ranking.length} of ${r.gridSize} combinations ranked on ${r.origins} origins (every ${r.everySteps} steps over the last ${r.spanSteps}); MASE scaled per origin over the ${r.scaleWindowSteps} steps before it, the same for every row; vs best = mean paired MASE difference ± standard error; cover = band coverage${nominal !== null && nominal !== undefined ? ` (nominal ${num(nominal, 2)})` : ''}; fit ms = mean per refit; gain = MASE below the seasonal-naive baseline.`,
  );
  if (r.ranking.length > 1) {
    const inNoise = r.ranking.filter((e) => e.vsBest?.withinNoise === true);
    if (inNoise.length) {
      const cheap = r.ranking.find((e) => e.id === r.noise.cheapestWithinNoise);
      out.push(
        `Noise: ${inNoise.length} setting(s) are within the noise of the best (${inNoise.map((e) => `#${e.rank}`).join(', ')}): this backtest cannot tell them apart (${r.noise.rule}).` +
          (cheap && cheap.rank !== 1 ? ` The cheapest of them is #${cheap.rank} (${cheap.label}, ${num(cheap.score.fit.meanMs, 0)} ms per refit).` : ''),
      );
    } else {
      const second = r.ranking[1].vsBest;
      out.push(second?.withinNoise === null ? `Noise: too few paired origins to judge (${r.noise.rule}).` : `Noise: the best is ahead of every other setting by more than ${NOISE_SE_MULTIPLE} standard errors.`);
    }
  }
  if (r.stoppedByBudget) out.push(`Budget: stopped starting combinations after ${formatStep(Math.max(1000, Math.round((r.budgetMs ?? 0) / 1000) * 1000))}; ${r.notStarted.length} not run.`);
  if (r.failed.length) out.push(`Failed: ${r.failed.map((f) => `${f.label}: ${f.code} ${f.message}`).join('; ')}`);
  if (r.skipped.length) {
    const shown = r.skipped.slice(0, 5).map((s) => `${s.label}: ${s.message}`);
    out.push(`Skipped ${r.skipped.length}: ${shown.join('; ')}${r.skipped.length > 5 ? '; …' : ''}`);
  }
  return out.join('\n') + '\n';
}
