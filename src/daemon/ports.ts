/**
 * What the cycle needs from its collaborators, as narrow interfaces. The real implementations are
 * the state store (src/store/state.ts, through an adapter), the fit pool (pool.ts) and the drift
 * layer (src/drift); tests pass small fakes. Keeping these narrow lets a cycle be tested without
 * SQLite, worker threads or a detector.
 */
import type { DriftState } from '../store/types.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import type { FittedForecaster, ForecastOutput, HoldoutResiduals } from '../forecast/engine.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import type { RegularSeries } from '../series/types.ts';
import type { ResidualPool } from '../evaluate/bands.ts';

/** One issued forecast as kept in the ledger until it matures and is scored. */
export interface IssuedForecast {
  series: string;
  /** Origin time (epoch ms): the last observed step the forecast was made from. */
  issuedAt: number;
  stepMs: number;
  /** Point forecasts, lead 1..H (targets at issuedAt + lead * stepMs). */
  values: number[];
  /** Band values per quantile key ("0.1" -> H values; NaN where a lead had no band). */
  bands: Record<string, number[]>;
  /** Largest Gaussian activation of the forecast input (novelty signal, in (0, 1]). */
  novelty: number;
}

/** radcast's local state as the cycle uses it. */
export interface CycleState {
  getModel(series: string): Promise<FittedForecaster | null>;
  putModel(series: string, fitted: FittedForecaster): Promise<void>;
  getResiduals(series: string): Promise<ResidualPool | null>;
  putResiduals(series: string, pool: ResidualPool): Promise<void>;
  /** Upsert by (series, issuedAt): re-issuing from the same origin replaces the entry. */
  recordIssued(f: IssuedForecast): Promise<void>;
  /** Entries not yet scored, oldest first. */
  pendingIssued(series: string): Promise<IssuedForecast[]>;
  /** Remove entries from the pending list (scored, or expired beyond the readable range). */
  settleIssued(series: string, issuedAts: number[]): Promise<void>;
  /** The newest issued forecast (scored or not), for the page and for at-target exogenous inputs. */
  latestIssued(series: string): Promise<IssuedForecast | null>;
  /** Opaque persisted state of the drift detector. */
  getDriftState(series: string): Promise<unknown | null>;
  putDriftState(series: string, state: unknown): Promise<void>;
  flush?(): Promise<void>;
  close?(): Promise<void>;
}

export interface FitRequest {
  settings: ForecastSettings;
  target: RegularSeries;
  exo: Record<string, RegularSeries>;
  originIndex: number;
  warm: FittedForecaster | null;
  /** Compute hold-out residuals (seed of the bands when none are stored yet). */
  holdout: boolean;
}

export interface FitResult {
  fitted: FittedForecaster;
  forecast: ForecastOutput;
  /** Time inside the fit (ms). */
  fitMs: number;
  /** Time of the forecast (ms). */
  predictMs: number;
  /** Hold-out residuals of the fit, when requested and computable. */
  holdout?: HoldoutResiduals;
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
