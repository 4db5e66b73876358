/**
 * One cycle of one series:
 *
 *   read     readings of the window + longest lag + margin (and of each exogenous input)
 *   prepare  regularise to the step, find the origin (last observed step), stale check
 *   fit      fitAt, warm-started from the model kept in the state store   } on a worker thread
 *            (decoded there; the fitted one comes back packed)             }
 *   predict  forecastAt, then bands from the stored residuals per lead    } (pool.ts)
 *   write    forecast batch to the store (no NaN ever written), model + ledger entry to state
 *   score    matured ledger entries vs actuals: residuals per lead, scores to the store
 *   drift    drift assessment (src/drift, through DriftAssessor) and the health write
 *
 * Every stage is timed. Any error ends this series' cycle with its code; the caller goes on with
 * the other series. Writes are retried when the error says a retry can help.
 */
import type { Logger } from 'pino';
import type { ResolvedSeries } from '../config/resolve.ts';
import type { ForecastBatch, ForecastPoint, HealthPoint, ScorePoint, SeriesStore, SourceSelector } from '../store/types.ts';
import type { Reading, RegularSeries } from '../series/types.ts';
import { regularize, lastValueIndex } from '../series/index.ts';
import { addResiduals, bandsForForecast, DEFAULT_RESIDUAL_CAPACITY, originPhase, type ResidualPool } from '../evaluate/bands.ts';
import { MetricAccumulator, quantileKey, seasonalScale, type MetricSet } from '../evaluate/metrics.ts';
import { systemClock, type Clock } from './clock.ts';
import { Backoff } from './backoff.ts';
import { DaemonError, canRetry, describeError, retryAfterMs, type ErrorRecord } from './errors.ts';
import type { DaemonMetrics } from './metrics.ts';
import { emptyTimings, type StageTimings } from './timings.ts';
import type { CycleState, DriftAssessment, DriftAssessor, Fitter, IssuedStep, MaturedError, PoolAddition } from './ports.ts';

export type CycleOutcome = 'ok' | 'failed' | 'stale' | 'aborted';
export type Stage = keyof StageTimings;

export interface SeriesCycleResult {
  series: string;
  outcome: CycleOutcome;
  ok: boolean;
  error?: ErrorRecord;
  /** Stage the error happened in. */
  failedStage?: Stage;
  timings: StageTimings;
  totalMs: number;
  /** Wall time of the fit request minus the work inside it: queueing and message passing (ms). */
  poolOverheadMs: number;
  /** Origin of the forecast written (epoch ms). */
  issuedAt?: number;
  forecast?: ForecastBatch;
  warmStarted?: boolean;
  /** Ledger steps scored / dropped as unscorable (actual before the readable range) in this cycle. */
  scored: number;
  expired: number;
  /** Overall score of the forecasts that matured in this cycle. */
  score?: MetricSet;
  drift?: DriftAssessment;
  readings: number;
  lastReadingAt: number | null;
}

export interface CycleOptions {
  store: SeriesStore;
  state: CycleState;
  fitter: Fitter;
  logger: Logger;
  clock?: Clock;
  metrics?: DaemonMetrics;
  /** INTEGRATION POINT (src/drift): without an assessor the drift stage is skipped and no health is written. */
  drift?: DriftAssessor;
  /** Extra steps read beyond window + longest lag, for late data (default: the horizon). */
  marginSteps?: number;
  /** Store write attempts (default 3) and their backoff. */
  writeAttempts?: number;
  writeBackoff?: Backoff;
  /** Residuals kept per lead (default 120). */
  residualCapacity?: number;
  /**
   * Where the latest forecast of another series comes from, for exogenous inputs used at target
   * time (default: the state ledger).
   */
  latestForecastOf?: (series: string) => Promise<ForecastBatch | null>;
}

/**
 * A read cache for one run over many series: exogenous inputs shared by many series are read
 * once, and regularised once per distinct set of regularise options (e.g. one outdoor
 * temperature feeding a thousand substations).
 */
export class ReadCache {
  #entries = new Map<string, Promise<Reading[]>>();
  #regular = new Map<string, RegularSeries>();
  /**
   * The regular series `make` builds for this key, built once per run. Callers must not change
   * it (the fits only read their inputs; inputs extended with forecasts are not cached).
   */
  regular(key: string, make: () => RegularSeries): RegularSeries {
    let s = this.#regular.get(key);
    if (!s) {
      s = make();
      this.#regular.set(key, s);
    }
    return s;
  }
  get(key: string, read: () => Promise<Reading[]>): Promise<Reading[]> {
    let p = this.#entries.get(key);
    if (!p) {
      p = read();
      this.#entries.set(key, p);
      p.catch(() => this.#entries.delete(key));
    }
    return p;
  }
  get size(): number {
    return this.#entries.size;
  }
}

class StageError extends Error {
  constructor(
    readonly stage: Stage,
    readonly inner: unknown,
  ) {
    super('stage failed');
  }
}

function assertFinite(series: string, what: string, v: number): void {
  if (!Number.isFinite(v)) {
    throw new DaemonError('NON_FINITE_FORECAST', `${what} is ${v}; the forecast is not written`, {
      series,
      hint: 'check the inputs of this origin (gaps, extreme values); the previous forecast stays in place',
    });
  }
}

/** Check every value and band of a batch before it is written: no NaN or Infinity reaches a store. */
export function checkBatchFinite(batch: ForecastBatch): void {
  for (const p of batch.points) {
    assertFinite(batch.series, `value at lead ${p.lead}`, p.value);
    assertFinite(batch.series, `target time at lead ${p.lead}`, p.t);
    for (const [q, v] of Object.entries(p.bands)) assertFinite(batch.series, `band ${q} at lead ${p.lead}`, v);
  }
}

export class SeriesCycle {
  readonly #o: CycleOptions;
  readonly #clock: Clock;

  constructor(opts: CycleOptions) {
    this.#o = opts;
    this.#clock = opts.clock ?? systemClock;
  }

  /**
   * Run one cycle of `r` as of `nowMs` (default: the clock). Never throws: failures come back as
   * a result with outcome 'failed' and the error code.
   */
  async run(r: ResolvedSeries, opts: { nowMs?: number; signal?: AbortSignal; cache?: ReadCache } = {}): Promise<SeriesCycleResult> {
    const clock = this.#clock;
    const t0 = clock.monotonicMs();
    const timings = emptyTimings();
    const result: SeriesCycleResult = {
      series: r.name,
      outcome: 'ok',
      ok: true,
      timings,
      totalMs: 0,
      poolOverheadMs: 0,
      scored: 0,
      expired: 0,
      readings: 0,
      lastReadingAt: null,
    };
    const timed = async <T>(stage: Stage, fn: () => Promise<T> | T): Promise<T> => {
      const s = clock.monotonicMs();
      try {
        return await fn();
      } catch (err) {
        throw err instanceof StageError ? err : new StageError(stage, err);
      } finally {
        timings[stage] += clock.monotonicMs() - s;
      }
    };
    try {
      await this.#cycle(r, opts.nowMs ?? clock.now(), opts.signal, opts.cache, result, timed);
    } catch (err) {
      const stage = err instanceof StageError ? err.stage : undefined;
      const inner = err instanceof StageError ? err.inner : err;
      const rec = describeError(inner);
      const aborted = opts.signal?.aborted === true && rec.code === 'SHUTDOWN_ABORTED';
      result.outcome = aborted ? 'aborted' : result.outcome === 'stale' ? 'stale' : 'failed';
      result.ok = false;
      result.error = rec;
      if (stage) result.failedStage = stage;
      const log = { series: r.name, code: rec.code, stage, hint: rec.hint, at: rec.at, err: rec.message };
      if (aborted) this.#o.logger.warn(log, 'series cycle aborted by shutdown before writing');
      else this.#o.logger.error(log, 'series cycle failed; retried next cycle');
    }
    result.totalMs = clock.monotonicMs() - t0;
    this.#o.metrics?.recordCycle({
      series: r.name,
      ok: result.ok,
      aborted: result.outcome === 'aborted',
      errorCode: result.error?.code,
      finishedAtMs: clock.now(),
      timings,
      totalMs: result.totalMs,
      fitWorkerMs: timings.fit > 0 && result.outcome !== 'stale' ? timings.fit : undefined,
    });
    return result;
  }

  async #cycle(
    r: ResolvedSeries,
    nowMs: number,
    signal: AbortSignal | undefined,
    cache: ReadCache | undefined,
    result: SeriesCycleResult,
    timed: <T>(stage: Stage, fn: () => Promise<T> | T) => Promise<T>,
  ): Promise<void> {
    const { store, state, fitter, logger } = this.#o;
    const s = r.settings;
    const step = s.stepMs;
    const H = s.features.horizon;
    const margin = this.#o.marginSteps ?? H;
    const endMs = Math.floor(nowMs / step) * step; // exclusive: the bucket now falls in is incomplete
    const spanSteps = s.windowSteps + r.maxLagSteps + margin;
    const startMs = endMs - spanSteps * step;

    // ---- read ----
    const { readings, exoReadings } = await timed('read', async () => {
      // Only inputs go through the run's cache: they are shared by many series, a target is read once.
      const read = (sel: SourceSelector, shared: boolean) => {
        const go = () => store.readReadings(sel, startMs, endMs);
        return cache && shared ? cache.get(JSON.stringify([sel, startMs, endMs]), go) : go();
      };
      const readings = await read(r.source, false);
      const exoReadings: Record<string, Reading[]> = {};
      for (const e of r.exogenous) {
        // For inputs used at target time the readings reach H steps further (where readings exist).
        exoReadings[e.name] = await read(e.source, true);
      }
      return { readings, exoReadings };
    });
    result.readings = readings.length;

    // ---- prepare ----
    const prepared = await timed('prepare', async () => {
      const regOpts = { ...s.regularize, stepMs: step, startMs, endMs, series: r.name };
      const target = regularize(readings, regOpts);
      const originIndex = lastValueIndex(target);
      const exo: Record<string, RegularSeries> = {};
      for (const e of r.exogenous) {
        const opts = { ...regOpts, series: e.name, endMs: e.atTarget ? endMs + H * step : endMs };
        if (e.atTarget) {
          // Extended with this run's latest forecast of the input below: a copy per series.
          const ex = regularize(exoReadings[e.name], opts);
          if (originIndex >= 0) await this.#extendWithForecast(ex, e.name, target.startMs + originIndex * step);
          exo[e.name] = ex;
        } else {
          const build = () => regularize(exoReadings[e.name], opts);
          exo[e.name] = cache ? cache.regular(JSON.stringify([e.source, opts]), build) : build();
        }
      }
      return { target, originIndex, exo };
    });
    const { target, originIndex, exo } = prepared;
    const lastReadingAt = originIndex >= 0 ? target.startMs + originIndex * step : null;
    result.lastReadingAt = lastReadingAt;

    // Same rule as the drift layer: the newest step older than drift.staleAfter is stale.
    const stale = lastReadingAt === null || nowMs - lastReadingAt > r.drift.staleAfterMs;
    let scoredErrors: MaturedError[] = [];
    let novelty: number | null = null;
    let recentNovelty: Array<{ t: number; activation: number }> = [];
    let baselineMase: number | null = null;
    let staleError: DaemonError | null = null;

    if (stale) {
      staleError = new DaemonError(
        'INPUT_STALE',
        lastReadingAt === null
          ? `no readings between ${new Date(startMs).toISOString()} and ${new Date(endMs).toISOString()}`
          : `newest reading is from ${new Date(lastReadingAt).toISOString()}, older than drift.staleAfter (${Math.round(r.drift.staleAfterMs / 60_000)} min)`,
        { series: r.name, hint: 'check that the source still delivers readings (selector, sensor, collector); no forecast is written from stale data' },
      );
    } else {
      // ---- fit + predict (worker) ----
      if (signal?.aborted) throw new StageError('fit', new DaemonError('SHUTDOWN_ABORTED', 'shutdown bound reached before the fit', { series: r.name }));
      // State reads count as preparation: the fit stage is the work inside the worker.
      const capacity = this.#o.residualCapacity ?? DEFAULT_RESIDUAL_CAPACITY;
      // The stored model goes to the worker as it is stored; it is decoded and checked there.
      const warmStored = await timed('prepare', () => state.getStoredModel(r.name));
      const phases = s.features.seasonSteps;
      // Residuals depend on the hour a forecast is issued at: the pool keeps each one's origin phase.
      const pool = await timed('prepare', () => state.getResidualPool(r.name, { horizon: H, phases, capacityPerLead: capacity }));
      const poolEmpty = pool.byLead.every((l) => l.length === 0);
      const wall0 = this.#clock.monotonicMs();
      let fr;
      try {
        fr = await fitter.fitAndForecast({ settings: s, target, exo, originIndex, warmStored, holdout: poolEmpty, noveltySteps: r.drift.enabled ? r.drift.settings.novelty.windowSteps : 0 }, signal);
      } catch (err) {
        throw new StageError('fit', err);
      }
      const wall = this.#clock.monotonicMs() - wall0;
      result.timings.fit += fr.fitMs;
      result.timings.predict += fr.predictMs;
      result.poolOverheadMs = Math.max(0, wall - fr.fitMs - fr.predictMs);
      result.warmStarted = fr.warmStarted;
      if (fr.warmRejected) logger.warn({ series: r.name, code: fr.warmRejected.code, err: fr.warmRejected.message }, 'stored model unusable; refitting cold');
      novelty = fr.forecast.novelty;
      recentNovelty = fr.recentNovelty ?? [];
      baselineMase = baselineFromHoldout(fr.holdout, target, originIndex, s.windowSteps, s.features.seasonSteps);

      // An empty pool is seeded with the fit's hold-out residuals (out of sample, before the origin).
      let seeded = false;
      const batch = await timed('predict', () => {
        if (poolEmpty && fr.holdout) {
          const ho = fr.holdout;
          ho.residualsByLead.forEach((list, i) => {
            const lead = i + 1;
            list.forEach((v, j) => {
              // Validation origins are consecutive steps from firstOrigin; list j is origin firstOrigin + (nOrigins - len + j).
              const o = ho.firstOrigin + (ho.nOrigins - list.length + j);
              if (Number.isFinite(v)) {
                addResiduals(pool, lead, [v], originPhase(target.startMs + o * step, step, phases));
                seeded = true;
              }
            });
          });
        }
        const bands = bandsForForecast(fr.forecast.values, pool, s.quantiles, { phase: originPhase(fr.forecast.originMs, step, phases) });
        const points: ForecastPoint[] = [];
        for (let h = 0; h < H; h++) {
          points.push({ t: fr.forecast.targetTimes[h], lead: h + 1, value: fr.forecast.values[h], bands: bands[h] });
        }
        return { series: r.output.name, issuedAt: fr.forecast.originMs, stepMs: step, points } satisfies ForecastBatch;
      });

      // ---- write ----
      await timed('write', async () => {
        try {
          checkBatchFinite(batch);
        } catch (err) {
          this.#o.metrics?.nanRejectedTotal.inc({ series: r.name });
          throw err;
        }
        if (signal?.aborted) throw new DaemonError('SHUTDOWN_ABORTED', 'shutdown bound reached before the write', { series: r.name });
        await this.#writeWithRetry('forecast', () => store.writeForecast(batch));
        await state.putStoredModel(r.name, fr.stored, nowMs);
        await state.recordIssued(r.name, batch);
      });
      result.issuedAt = batch.issuedAt;
      result.forecast = batch;

      // ---- score ----
      scoredErrors = await timed('score', () => this.#score(r, target, originIndex, result, pool, seeded));
    }

    // ---- drift + health ----
    const assessor = this.#o.drift;
    if (assessor && r.drift.enabled) {
      await timed('drift', async () => {
        const previous = await state.getDriftState(r.name);
        const a = await assessor.assess({ series: r.name, resolved: r, nowMs, lastReadingAt, matured: scoredErrors, novelty, recentNovelty, baselineMase, previous });
        await state.putDriftState(r.name, a.next, nowMs);
        result.drift = a;
        if (a.transition) logger.info({ series: r.name, from: a.transition.from, to: a.transition.to, statistic: a.statistic, recentMase: a.recentMase, baselineMase: a.baselineMase, noveltyShare: a.noveltyShare }, 'drift state changed');
        this.#o.metrics?.recordDrift(r.name, a.state, a.statistic, a.noveltyShare, a.recentMase);
        const hp: HealthPoint = {
          series: r.output.name,
          t: lastReadingAt ?? endMs,
          state: a.state,
          statistic: a.statistic,
          recentMase: a.recentMase,
          baselineMase: a.baselineMase,
          noveltyShare: a.noveltyShare,
          lastReadingAt,
        };
        if (signal?.aborted) throw new DaemonError('SHUTDOWN_ABORTED', 'shutdown bound reached before the health write', { series: r.name });
        await this.#writeWithRetry('health', () => store.writeHealth([hp]));
      });
    }

    if (staleError) {
      result.outcome = 'stale';
      throw new StageError('prepare', staleError);
    }
  }

  /**
   * Score every ledger step whose target time lies at or before the origin (its actual is known):
   * residuals per lead go to the band pool, scores per lead and overall (lead 0) to the store.
   */
  async #score(r: ResolvedSeries, target: RegularSeries, originIndex: number, result: SeriesCycleResult, pool: ResidualPool, seeded: boolean): Promise<MaturedError[]> {
    const { state, store } = this.#o;
    const s = r.settings;
    const H = s.features.horizon;
    const step = s.stepMs;
    const m = s.features.seasonSteps;
    const originMs = target.startMs + originIndex * step;
    const due = await state.matured(r.name, originMs);
    const errors: MaturedError[] = [];
    if (due.length === 0) {
      if (seeded) await state.putResidualPool(r.name, pool);
      return errors;
    }
    const phases = s.features.seasonSteps;
    const quantiles = s.quantiles;
    const keys = quantiles.map(quantileKey);
    const overall = new MetricAccumulator(quantiles);
    const byLead = new Map<number, MetricAccumulator>();
    const scales = new Map<number, number>();
    const added: PoolAddition[] = [];
    const settled: IssuedStep[] = [];
    const bandVals = new Float64Array(quantiles.length);
    let expired = 0;
    let newestT = 0;
    for (const st of due) {
      settled.push(st);
      const i = Math.round((st.t - target.startMs) / step);
      if (i < 0 || st.lead > H) {
        expired++; // its actual lies before the readable range, or the horizon shrank since
        continue;
      }
      // Interpolated (filled) steps are not observations: they are not scored.
      const actual = target.filled && target.filled[i] ? Number.NaN : target.values[i];
      let scale = scales.get(st.issuedAt);
      if (scale === undefined) {
        const oi = Math.round((st.issuedAt - target.startMs) / step);
        scale = seasonalScale(target.values, Math.max(0, oi - s.windowSteps + 1), Math.max(0, oi), m).scale;
        scales.set(st.issuedAt, scale);
      }
      for (let q = 0; q < keys.length; q++) bandVals[q] = st.bands[keys[q]] ?? Number.NaN;
      overall.add(actual, st.value, scale, bandVals);
      let acc = byLead.get(st.lead);
      if (!acc) byLead.set(st.lead, (acc = new MetricAccumulator(quantiles)));
      acc.add(actual, st.value, scale, bandVals);
      if (!Number.isFinite(actual)) continue;
      const e = actual - st.value;
      const phase = originPhase(st.issuedAt, step, phases);
      addResiduals(pool, st.lead, [e], phase);
      added.push({ lead: st.lead, residual: e, phase });
      errors.push({ t: st.t, lead: st.lead, error: e, scaledError: scale > 0 ? Math.abs(e) / scale : Number.NaN });
      newestT = Math.max(newestT, st.t);
    }
    errors.sort((a, b) => a.t - b.t || a.lead - b.lead);
    const toPoint = (lead: number, ms: MetricSet): ScorePoint | null =>
      ms.n > 0
        ? {
            series: r.output.name,
            t: newestT,
            lead,
            mae: ms.mae ?? Number.NaN,
            rmse: ms.rmse ?? Number.NaN,
            mase: ms.mase ?? Number.NaN,
            bias: ms.bias ?? Number.NaN,
            coverage: ms.coverage ?? Number.NaN,
            n: ms.n,
            season: m,
          }
        : null;
    const points: ScorePoint[] = [];
    const all = overall.result();
    result.score = all;
    const p0 = toPoint(0, all);
    if (p0) points.push(p0);
    for (const lead of [...byLead.keys()].sort((a, b) => a - b)) {
      const p = toPoint(lead, byLead.get(lead)!.result());
      if (p) points.push(p);
    }
    if (points.length) await this.#writeWithRetry('scores', () => store.writeScores(points));
    // A pool seeded in this cycle is written whole; otherwise the store may append the additions.
    if (seeded) await state.putResidualPool(r.name, pool);
    else if (added.length > 0) await state.putResidualPool(r.name, pool, added);
    await state.removeIssued(r.name, settled);
    result.scored = settled.length - expired;
    result.expired = expired;
    return errors;
  }

  /** Append the latest forecast of an exogenous input after its last reading (inputs used at target time). */
  async #extendWithForecast(ex: RegularSeries, name: string, originMs: number): Promise<void> {
    const latest = await (this.#o.latestForecastOf ?? ((n: string) => this.#o.state.latestIssued(n)))(name);
    if (!latest || latest.stepMs !== ex.stepMs) return; // missing inputs surface as the engine's MISSING_INPUT
    for (const p of latest.points) {
      const i = Math.round((p.t - ex.startMs) / ex.stepMs);
      if (p.t <= originMs || i < 0 || i >= ex.values.length) continue;
      if (Number.isNaN(ex.values[i])) ex.values[i] = p.value;
    }
  }

  async #writeWithRetry(kind: 'forecast' | 'scores' | 'health', fn: () => Promise<void>): Promise<void> {
    const attempts = this.#o.writeAttempts ?? 3;
    const backoff = this.#o.writeBackoff ?? new Backoff({ baseMs: 250, capMs: 5000 });
    const storeKind = this.#o.store.kind;
    for (let a = 0; ; a++) {
      try {
        await fn();
        return;
      } catch (err) {
        if (a + 1 >= attempts || !canRetry(err)) {
          this.#o.metrics?.writeFailuresTotal.inc({ store: storeKind, kind });
          throw err;
        }
        this.#o.metrics?.writeRetriesTotal.inc({ store: storeKind, kind });
        const delay = retryAfterMs(err) ?? backoff.nextDelayMs(a);
        this.#o.logger.warn({ store: storeKind, kind, attempt: a + 1, delayMs: Math.round(delay), code: describeError(err).code }, 'store write failed; retrying');
        await this.#clock.sleep(delay);
      }
    }
  }
}

/** MASE of the fit's hold-out forecasts, scaled like the live scores (the drift baseline). */
function baselineFromHoldout(
  holdout: { residualsByLead: number[][] } | undefined,
  target: RegularSeries,
  originIndex: number,
  windowSteps: number,
  m: number,
): number | null {
  if (!holdout) return null;
  const scale = seasonalScale(target.values, Math.max(0, originIndex - windowSteps + 1), originIndex, m).scale;
  if (!(scale > 0)) return null;
  let sum = 0;
  let n = 0;
  for (const lead of holdout.residualsByLead) {
    for (const v of lead) {
      if (Number.isFinite(v)) {
        sum += Math.abs(v);
        n++;
      }
    }
  }
  return n > 0 ? sum / n / scale : null;
}
