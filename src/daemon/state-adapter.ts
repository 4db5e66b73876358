/**
 * The cycle's view (CycleState) of radcast's local state store (src/store/state.ts). Each call is
 * one SQLite transaction; the warm-start model is stored as the whole FittedForecaster (network,
 * scaler, chosen settings) and checked when read back, so a damaged row means a cold refit, not a
 * failed cycle.
 */
import type { Logger } from 'pino';
import type { StateStore } from '../store/state.ts';
import type { ForecastBatch } from '../store/types.ts';
import type { RbfModel } from '../model/types.ts';
import { parseFittedForecaster, type FittedForecaster } from '../forecast/engine.ts';
import { describeError } from './errors.ts';
import type { CycleState, IssuedStep, ResidualEntry } from './ports.ts';

/** Reference error level a drift detector compares against. */
export interface DriftBaseline {
  /** MASE over all leads. */
  mase: number;
  /** MASE per lead (index lead - 1), when known. */
  byLead?: number[];
  /** Where it came from: a rolling-origin backtest, or the hold-out tail of a cold fit. */
  source: 'backtest' | 'holdout';
  atMs: number;
}

const BASELINE_KEY = (s: string) => `drift-baseline:${s}`;

export class StateAdapter implements CycleState {
  readonly store: StateStore;
  readonly #logger: Logger;

  constructor(store: StateStore, logger: Logger) {
    this.store = store;
    this.#logger = logger;
  }

  async getModel(series: string): Promise<FittedForecaster | null> {
    const row = this.store.loadModel(series);
    if (!row) return null;
    try {
      return parseFittedForecaster(row.model, series);
    } catch (err) {
      const e = describeError(err);
      this.#logger.warn({ series, code: e.code, err: e.message }, 'stored model unusable; refitting cold');
      return null;
    }
  }

  async putModel(series: string, fitted: FittedForecaster, atMs: number): Promise<void> {
    // The state store keeps any JSON-able model; the daemon's is the whole forecaster.
    this.store.saveModel(series, fitted as unknown as RbfModel, atMs);
  }

  async getResiduals(series: string, perLead: number): Promise<ResidualEntry[]> {
    const out: ResidualEntry[] = [];
    for (const rows of this.store.residuals(series, perLead).values()) out.push(...rows);
    return out.sort((a, b) => a.t - b.t || a.lead - b.lead);
  }

  async addResiduals(series: string, rows: ResidualEntry[], keepPerLead: number): Promise<void> {
    this.store.addResiduals(series, rows, keepPerLead);
  }

  async recordIssued(series: string, batch: ForecastBatch): Promise<void> {
    // Keyed by the configured name (the batch itself carries the output name).
    this.store.recordIssued([{ ...batch, series }]);
  }

  async matured(series: string, upToMs: number): Promise<IssuedStep[]> {
    return this.store.matured(series, upToMs).map((e) => ({ issuedAt: e.issuedAt, lead: e.lead, t: e.t, value: e.value, bands: e.bands }));
  }

  async removeIssued(series: string, steps: Array<Pick<IssuedStep, 'issuedAt' | 'lead'>>): Promise<void> {
    this.store.removeIssued(steps.map((s) => ({ series, issuedAt: s.issuedAt, lead: s.lead })));
  }

  async latestIssued(series: string): Promise<ForecastBatch | null> {
    return this.store.latestIssued(series);
  }

  async getDriftState(series: string): Promise<unknown | null> {
    return this.store.loadDriftState(series)?.state ?? null;
  }

  async putDriftState(series: string, state: unknown, atMs: number): Promise<void> {
    this.store.saveDriftState(series, state, atMs);
  }

  getBaseline(series: string): DriftBaseline | null {
    return this.store.getJson<DriftBaseline>(BASELINE_KEY(series)) ?? null;
  }

  putBaseline(series: string, b: DriftBaseline): void {
    this.store.setJson(BASELINE_KEY(series), b, b.atMs);
  }
}
