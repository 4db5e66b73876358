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
import type { CycleState, IssuedStep } from './ports.ts';
import { createResidualPool, residualPoolFromRows, type ResidualPool } from '../evaluate/bands.ts';

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
const POOL_KEY = (s: string) => `residual-pool:${s}`;

/**
 * A residual pool as stored: one kv row per series instead of one SQLite row per residual. The
 * cycle reads the whole pool every time (the bands need all of it), and 24 leads x 336 residuals
 * read row by row cost tens of milliseconds of main-thread time per series; decoding two base64
 * arrays costs well under one. Values are float64 (exact), phases uint16.
 */
export interface EncodedPool {
  v: 1;
  horizon: number;
  phases: number;
  capacityPerLead: number;
  dropped: number;
  /** Residuals per lead. */
  counts: number[];
  /** Base64 of the float64 residuals, lead 1 first, oldest first within a lead. */
  values: string;
  /** Base64 of the uint16 origin phases, same order. */
  phase: string;
}

export function encodePool(pool: ResidualPool): EncodedPool {
  const counts = pool.byLead.map((l) => l.length);
  const n = counts.reduce((a, b) => a + b, 0);
  const values = new Float64Array(n);
  const phase = new Uint16Array(n);
  let k = 0;
  pool.byLead.forEach((list, h) => {
    for (let i = 0; i < list.length; i++, k++) {
      values[k] = list[i];
      phase[k] = pool.phaseByLead[h][i] ?? 0;
    }
  });
  return {
    v: 1,
    horizon: pool.horizon,
    phases: pool.phases,
    capacityPerLead: pool.capacityPerLead,
    dropped: pool.dropped,
    counts,
    values: Buffer.from(values.buffer).toString('base64'),
    phase: Buffer.from(phase.buffer).toString('base64'),
  };
}

/** null when the stored value is not a readable v1 pool. */
export function decodePool(e: EncodedPool): ResidualPool | null {
  try {
    if (e.v !== 1 || !Array.isArray(e.counts) || e.counts.length !== e.horizon) return null;
    const vb = Buffer.from(e.values, 'base64');
    const pb = Buffer.from(e.phase, 'base64');
    const n = e.counts.reduce((a, b) => a + b, 0);
    if (vb.length !== n * 8 || pb.length !== n * 2) return null;
    const values = new Float64Array(vb.buffer.slice(vb.byteOffset, vb.byteOffset + vb.length));
    const phase = new Uint16Array(pb.buffer.slice(pb.byteOffset, pb.byteOffset + pb.length));
    const pool = createResidualPool(e.horizon, Math.max(1, e.capacityPerLead), Math.max(1, e.phases));
    pool.dropped = e.dropped;
    let k = 0;
    e.counts.forEach((c, h) => {
      pool.byLead[h] = Array.from(values.subarray(k, k + c));
      pool.phaseByLead[h] = Array.from(phase.subarray(k, k + c));
      k += c;
    });
    return pool;
  } catch {
    return null;
  }
}

export class StateAdapter implements CycleState {
  readonly store: StateStore;
  readonly #logger: Logger;
  /** Step of a series (to read residual rows of older state files); unset = those rows are ignored. */
  readonly #stepOf: ((series: string) => number) | undefined;

  constructor(store: StateStore, logger: Logger, opts: { stepOf?: (series: string) => number } = {}) {
    this.store = store;
    this.#logger = logger;
    this.#stepOf = opts.stepOf;
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

  async getResidualPool(series: string, shape: { horizon: number; phases: number; capacityPerLead: number }): Promise<ResidualPool> {
    const stored = this.store.getJson<EncodedPool>(POOL_KEY(series));
    if (stored) {
      const pool = decodePool(stored);
      if (pool && pool.horizon === shape.horizon && pool.phases === shape.phases) {
        pool.capacityPerLead = shape.capacityPerLead;
        for (let i = 0; i < pool.byLead.length; i++) {
          const over = pool.byLead[i].length - shape.capacityPerLead;
          if (over > 0) {
            pool.byLead[i].splice(0, over);
            pool.phaseByLead[i].splice(0, over);
          }
        }
        return pool;
      }
      if (!pool) this.#logger.warn({ series, code: 'STATE_POOL_UNREADABLE' }, 'stored band residuals unreadable; the bands start again from the hold-out residuals');
      return createResidualPool(shape.horizon, shape.capacityPerLead, shape.phases);
    }
    // State files written before pools were kept whole hold residual rows: build the pool from them once.
    const rows: Array<{ lead: number; t: number; residual: number }> = [];
    for (const list of this.store.residuals(series, shape.capacityPerLead).values()) rows.push(...list);
    if (rows.length === 0 || !this.#stepOf) return createResidualPool(shape.horizon, shape.capacityPerLead, shape.phases);
    rows.sort((a, b) => a.t - b.t);
    return residualPoolFromRows(rows, { horizon: shape.horizon, stepMs: this.#stepOf(series), phases: shape.phases, capacityPerLead: shape.capacityPerLead });
  }

  async putResidualPool(series: string, pool: ResidualPool): Promise<void> {
    this.store.setJson(POOL_KEY(series), encodePool(pool), Date.now());
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
