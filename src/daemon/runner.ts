/**
 * One run over many series (what `radcast once`, the demo and the throughput benchmark do): every
 * series gets one cycle, at most `concurrency` at a time, failures are collected per series and
 * the others go on. Series that use another configured series' forecast as an input (exogenous
 * at target time) run after that series, so they see its fresh forecast.
 */
import type { ResolvedSeries } from '../config/resolve.ts';
import { Limiter } from './limiter.ts';
import { ReadCache, type SeriesCycle, type SeriesCycleResult } from './cycle.ts';
import { addTimings, emptyTimings, type StageTimings } from './timings.ts';
import { systemClock, type Clock } from './clock.ts';

export interface RunSummary {
  results: SeriesCycleResult[];
  ok: number;
  failed: number;
  stale: number;
  aborted: number;
  /** Failures (failed + stale) by error code. */
  byCode: Record<string, number>;
  /** Stage times summed over all series (ms of work; with several workers more than the wall time). */
  timings: StageTimings;
  poolOverheadMs: number;
  wallMs: number;
}

/** Waves of series: each wave only depends (at-target exogenous inputs) on earlier waves. */
export function dependencyWaves(series: readonly ResolvedSeries[]): ResolvedSeries[][] {
  const byName = new Map(series.map((s) => [s.name, s]));
  const level = new Map<string, number>();
  const visiting = new Set<string>();
  const levelOf = (s: ResolvedSeries): number => {
    const known = level.get(s.name);
    if (known !== undefined) return known;
    if (visiting.has(s.name)) return 0; // a cycle of at-target inputs: break it, order arbitrary
    visiting.add(s.name);
    let l = 0;
    for (const e of s.exogenous) {
      const dep = e.atTarget && e.configured ? byName.get(e.name) : undefined;
      if (dep) l = Math.max(l, levelOf(dep) + 1);
    }
    visiting.delete(s.name);
    level.set(s.name, l);
    return l;
  };
  const waves: ResolvedSeries[][] = [];
  for (const s of series) {
    const l = levelOf(s);
    (waves[l] ??= []).push(s);
  }
  return waves.filter((w) => w && w.length > 0);
}

export interface RunAllOptions {
  concurrency: number;
  /** Cycle time (default: the clock). */
  nowMs?: number;
  signal?: AbortSignal;
  clock?: Clock;
  onResult?: (r: SeriesCycleResult) => void;
}

export async function runAll(cycle: SeriesCycle, series: readonly ResolvedSeries[], opts: RunAllOptions): Promise<RunSummary> {
  const clock = opts.clock ?? systemClock;
  const t0 = clock.monotonicMs();
  const nowMs = opts.nowMs ?? clock.now();
  const limiter = new Limiter(Math.max(1, opts.concurrency));
  const cache = new ReadCache();
  const results: SeriesCycleResult[] = [];
  for (const wave of dependencyWaves(series)) {
    await Promise.all(
      wave.map((s) =>
        limiter.run(async () => {
          const r = await cycle.run(s, { nowMs, signal: opts.signal, cache });
          results.push(r);
          opts.onResult?.(r);
        }),
      ),
    );
  }
  const order = new Map(series.map((s, i) => [s.name, i]));
  results.sort((a, b) => (order.get(a.series) ?? 0) - (order.get(b.series) ?? 0));
  const summary: RunSummary = { results, ok: 0, failed: 0, stale: 0, aborted: 0, byCode: {}, timings: emptyTimings(), poolOverheadMs: 0, wallMs: 0 };
  for (const r of results) {
    summary[r.outcome === 'ok' ? 'ok' : r.outcome]++;
    if (r.error && r.outcome !== 'aborted') summary.byCode[r.error.code] = (summary.byCode[r.error.code] ?? 0) + 1;
    addTimings(summary.timings, r.timings);
    summary.poolOverheadMs += r.poolOverheadMs;
  }
  summary.wallMs = clock.monotonicMs() - t0;
  return summary;
}
