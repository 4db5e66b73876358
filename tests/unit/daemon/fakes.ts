/** In-memory stand-ins for the store, the state store and the drift layer, for cycle tests. */
import type { ForecastBatch, HealthPoint, ScorePoint, SeriesStore, SourceSelector } from '../../../src/store/types.ts';
import type { Reading } from '../../../src/series/types.ts';
import type { CycleState, IssuedStep } from '../../../src/daemon/ports.ts';
import { createResidualPool, type ResidualPool } from '../../../src/evaluate/bands.ts';
import { decodeFittedForecaster, type FittedForecaster, type StoredForecaster } from '../../../src/forecast/engine.ts';
import { parseConfigObject } from '../../../src/config/load.ts';
import type { ResolvedSeries } from '../../../src/config/resolve.ts';
import { mulberry32 } from '../../../src/model/index.ts';

export const HOUR = 3600_000;

export class MemoryStore implements SeriesStore {
  readonly kind = 'memory';
  readings = new Map<string, Reading[]>();
  forecasts: ForecastBatch[] = [];
  scores: ScorePoint[] = [];
  health: HealthPoint[] = [];
  /** Per-call hooks to inject failures: return an error to throw it. */
  failRead?: (sel: SourceSelector) => unknown;
  failWrite?: (kind: 'forecast' | 'scores' | 'health') => unknown;
  reads = 0;
  closed = false;
  flushed = 0;

  async readReadings(sel: SourceSelector, fromMs: number, toMs: number): Promise<Reading[]> {
    this.reads++;
    const e = this.failRead?.(sel);
    if (e) throw e;
    return (this.readings.get(sel.name) ?? []).filter((r) => r.t >= fromMs && r.t < toMs);
  }
  async writeForecast(batch: ForecastBatch): Promise<void> {
    const e = this.failWrite?.('forecast');
    if (e) throw e;
    this.forecasts.push(structuredClone(batch));
  }
  async writeScores(points: ScorePoint[]): Promise<void> {
    const e = this.failWrite?.('scores');
    if (e) throw e;
    this.scores.push(...points);
  }
  async writeHealth(points: HealthPoint[]): Promise<void> {
    const e = this.failWrite?.('health');
    if (e) throw e;
    this.health.push(...points);
  }
  async ping(): Promise<boolean> {
    return !this.closed;
  }
  async flush(): Promise<void> {
    this.flushed++;
  }
  async close(): Promise<void> {
    this.closed = true;
  }
}

export class MemoryState implements CycleState {
  /** Warm-start models as stored (packed bytes, or JSON text to play an older state file). */
  models = new Map<string, StoredForecaster>();
  pools = new Map<string, ResidualPool>();
  ledger = new Map<string, Map<string, IssuedStep>>();
  latest = new Map<string, ForecastBatch>();
  drift = new Map<string, unknown>();

  async getStoredModel(series: string) {
    const m = this.models.get(series);
    return m === undefined ? null : typeof m === 'string' ? m : m.slice();
  }
  async putStoredModel(series: string, stored: Uint8Array) {
    this.models.set(series, stored.slice());
  }
  /** The stored model decoded (for assertions). */
  model(series: string): FittedForecaster | undefined {
    const m = this.models.get(series);
    return m === undefined ? undefined : decodeFittedForecaster(m, series);
  }
  async getResidualPool(series: string, shape: { horizon: number; phases: number; capacityPerLead: number }): Promise<ResidualPool> {
    const p = this.pools.get(series);
    return p && p.horizon === shape.horizon && p.phases === shape.phases ? structuredClone(p) : createResidualPool(shape.horizon, shape.capacityPerLead, shape.phases);
  }
  async putResidualPool(series: string, pool: ResidualPool) {
    this.pools.set(series, structuredClone(pool));
  }
  /** Residuals of one lead, oldest first (for assertions). */
  residualsOf(series: string, lead: number): number[] {
    return [...(this.pools.get(series)?.byLead[lead - 1] ?? [])];
  }
  async recordIssued(series: string, batch: ForecastBatch) {
    const m = this.ledger.get(series) ?? new Map<string, IssuedStep>();
    for (const p of batch.points) m.set(`${batch.issuedAt}|${p.lead}`, { issuedAt: batch.issuedAt, lead: p.lead, t: p.t, value: p.value, bands: { ...p.bands } });
    this.ledger.set(series, m);
    this.latest.set(series, structuredClone(batch));
  }
  async matured(series: string, upToMs: number) {
    return [...(this.ledger.get(series)?.values() ?? [])].filter((e) => e.t <= upToMs).sort((a, b) => a.t - b.t || a.lead - b.lead).map((e) => structuredClone(e));
  }
  async removeIssued(series: string, steps: Array<Pick<IssuedStep, 'issuedAt' | 'lead'>>) {
    for (const s of steps) this.ledger.get(series)?.delete(`${s.issuedAt}|${s.lead}`);
  }
  /** Ledger steps still waiting (for assertions). */
  pending(series: string): IssuedStep[] {
    return [...(this.ledger.get(series)?.values() ?? [])];
  }
  async latestIssued(series: string) {
    return structuredClone(this.latest.get(series) ?? null);
  }
  async getDriftState(series: string) {
    return this.drift.get(series) ?? null;
  }
  async putDriftState(series: string, state: unknown) {
    this.drift.set(series, state);
  }
}

/**
 * Invented hourly heat-load-like series for tests: a daily cycle, a weekly dip and seeded noise
 * (demo-style data; not a reference).
 */
export function syntheticLoad(opts: { fromMs: number; toMs: number; seed?: number; level?: number }): Reading[] {
  const rnd = mulberry32(opts.seed ?? 7);
  const out: Reading[] = [];
  const level = opts.level ?? 500;
  for (let t = opts.fromMs; t < opts.toMs; t += HOUR) {
    const hour = (t / HOUR) % 24;
    const day = Math.floor(t / (24 * HOUR)) % 7;
    const v = level + 120 * Math.sin((2 * Math.PI * (hour - 6)) / 24) - (day >= 5 ? 60 : 0) + 15 * (rnd() - 0.5);
    out.push({ t, v });
  }
  return out;
}

/** Resolve series entries through the real config loader (so tests use real defaults and checks). */
export function resolved(entries: Array<Record<string, unknown>>, defaults: Record<string, unknown> = {}): ResolvedSeries[] {
  const r = parseConfigObject({
    defaults: { window: '3w', lags: ['1-24', 168], centres: 8, horizon: 24, refit: '5 * * * *', fit: { restarts: 1, widthIterations: 1 }, ...defaults },
    series: entries,
  });
  if (!r.ok) throw new Error(r.issues.map((i) => `${i.path}: ${i.message}`).join('\n'));
  return r.value.series;
}
