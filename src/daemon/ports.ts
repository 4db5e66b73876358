/**
 * What the cycle needs from its collaborators, as narrow interfaces. The real implementations are
 * the state store (src/store/state.ts, through an adapter), the fit pool (pool.ts) and the drift
 * layer (src/drift); tests pass small fakes. Keeping these narrow lets a cycle be tested without
 * SQLite, worker threads or a detector.
 */
import type { DriftState, ForecastBatch } from '../store/types.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import type { FittedForecaster, ForecastOutput, HoldoutResiduals, StoredForecaster } from '../forecast/engine.ts';
import type { ResidualPool } from '../evaluate/bands.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import type { RegularSeries } from '../series/types.ts';

/** One issued forecast step as kept in the ledger until its actual arrives and it is scored. */
export interface IssuedStep {
  /** Origin time of the forecast it belongs to (epoch ms). */
  issuedAt: number;
  lead: number;
  /** Target time (epoch ms). */
  t: number;
  value: number;
  /** Band values keyed by quantile ("0.1" -> value). */
  bands: Record<string, number>;
}

/** One residual added to a band pool (addResiduals(pool, lead, [residual], phase)). */
export interface PoolAddition {
  lead: number;
  residual: number;
  phase: number;
}

/** A residual (actual - forecast) of one lead, keyed by its target time. */
export interface ResidualEntry {
  lead: number;
  t: number;
  residual: number;
}

/**
 * radcast's local state as the cycle uses it (src/store/state.ts through StateAdapter; tests use
 * an in-memory fake). Series are keyed by their configured name.
 */
export interface CycleState {
  /**
   * The warm-start model as stored (packed bytes, or JSON text in older state files), not decoded:
   * the fit worker decodes and checks it, so the main thread never parses it.
   */
  getStoredModel(series: string): Promise<StoredForecaster | null>;
  /** Keeps the bytes of encodeFittedForecaster as the series' warm-start model. */
  putStoredModel(series: string, stored: Uint8Array, atMs: number): Promise<void>;
  /**
   * The series' residual pool for the bands (evaluate/bands.ts), empty when there is none yet or
   * when its shape (horizon, phases) no longer matches.
   */
  getResidualPool(series: string, shape: { horizon: number; phases: number; capacityPerLead: number }): Promise<ResidualPool>;
  /**
   * Keeps the pool. `added`: the residuals added to it, in order, since getResidualPool returned
   * it; with them the store may append just those instead of rewriting the whole pool.
   */
  putResidualPool(series: string, pool: ResidualPool, added?: readonly PoolAddition[]): Promise<void>;
  /** Ledger: record every step of the batch (idempotent per issue time + lead); also the series' latest forecast. */
  recordIssued(series: string, batch: ForecastBatch): Promise<void>;
  /** Ledger steps with target time <= upToMs, oldest target first. */
  matured(series: string, upToMs: number): Promise<IssuedStep[]>;
  /** Remove scored (or unscorable) steps. */
  removeIssued(series: string, steps: Array<Pick<IssuedStep, 'issuedAt' | 'lead'>>): Promise<void>;
  /** The newest forecast issued for the series, for the page and for at-target exogenous inputs. */
  latestIssued(series: string): Promise<ForecastBatch | null>;
  /** Opaque persisted state of the drift detector. */
  getDriftState(series: string): Promise<unknown | null>;
  putDriftState(series: string, state: unknown, atMs: number): Promise<void>;
}

export interface FitRequest {
  settings: ForecastSettings;
  target: RegularSeries;
  exo: Record<string, RegularSeries>;
  originIndex: number;
  /** Warm start as a decoded forecaster (tests, benchmarks); wins over warmStored. */
  warm?: FittedForecaster | null;
  /**
   * Warm start as the state store keeps it; decoded and checked where the fit runs. A damaged
   * one makes the fit cold and comes back as `warmRejected`.
   */
  warmStored?: StoredForecaster | null;
  /** Compute hold-out residuals (seed of the bands when none are stored yet). */
  holdout: boolean;
  /** Also the novelty of the inputs at the steps before the origin, this many steps back (drift novelty window). */
  noveltySteps?: number;
  /** Also return the decoded forecaster from a worker thread (a structured clone; inline fits always return it). */
  returnFitted?: boolean;
}

export interface FitResult {
  /** The fitted forecaster packed for the state store (encodeFittedForecaster; moved, not copied, out of a worker). */
  stored: Uint8Array;
  /** Centres and widths came from the warm start. */
  warmStarted: boolean;
  /** The stored warm start could not be used (damaged, other format): the fit was cold. */
  warmRejected?: { code: string; message: string };
  /** The forecaster itself: inline fits, or when the request asked for it (returnFitted). */
  fitted?: FittedForecaster;
  forecast: ForecastOutput;
  /** Time inside the fit (ms), decoding the warm start and packing the result included. */
  fitMs: number;
  /** Time of the forecast (ms). */
  predictMs: number;
  /** Hold-out residuals of the fit, when requested and computable. */
  holdout?: HoldoutResiduals;
  /** Novelty (largest activation) of the inputs at the noveltySteps steps before the origin, oldest first. */
  recentNovelty?: Array<{ t: number; activation: number }>;
}

/** Runs fitAt + forecastAt, inline or on a worker thread. */
export interface Fitter {
  readonly kind: 'inline' | 'pool';
  fitAndForecast(req: FitRequest, signal?: AbortSignal): Promise<FitResult>;
  /** Tasks waiting for a worker. */
  readonly queued: number;
  stop(): Promise<void>;
}

/** One matured forecast error handed to the drift layer. */
export interface MaturedError {
  /** Target time (epoch ms). */
  t: number;
  lead: number;
  /** actual - forecast, series units. */
  error: number;
  /** |error| / MASE scale (NaN when the scale is unknown). */
  scaledError: number;
}

export interface DriftInput {
  series: string;
  resolved: ResolvedSeries;
  nowMs: number;
  /** Time of the newest reading (epoch ms), null when the window is empty. */
  lastReadingAt: number | null;
  /** Errors that matured in this cycle, oldest first. */
  matured: MaturedError[];
  /** Novelty of the input of the forecast issued this cycle (null when none was issued). */
  novelty: number | null;
  /** Novelty of the inputs at the steps before this cycle's origin (so the share does not depend on the refit schedule). */
  recentNovelty?: Array<{ t: number; activation: number }>;
  /** Baseline scaled-error level from the backtest / hold-out (MASE), when known. */
  baselineMase: number | null;
  /** What getDriftState returned. */
  previous: unknown | null;
}

export interface DriftAssessment {
  state: DriftState;
  statistic: number;
  recentMase: number;
  baselineMase: number;
  noveltyShare: number;
  /** Detector state to persist for the next cycle. */
  next: unknown;
  /** Set when the state changed in this assessment. */
  transition?: { from: DriftState | null; to: DriftState };
}

/**
 * INTEGRATION POINT with src/drift (issue 7). The cycle calls `assess` once per series cycle
 * with the matured errors and the novelty; the returned state goes to the health write and to
 * /metrics. When no assessor is wired the drift stage is skipped and no health point is written
 * (nothing is invented in its place).
 */
export interface DriftAssessor {
  assess(input: DriftInput): DriftAssessment | Promise<DriftAssessment>;
}
