/**
 * The cycle's view (CycleState) of radcast's local state store (src/store/state.ts). Each call is
 * one SQLite transaction. The warm-start model is the whole FittedForecaster (network, scaler,
 * chosen settings), kept packed (encodeFittedForecaster: JSON for the small fields, raw float64
 * for the arrays) and handed to the fit worker undecoded; the worker checks it, so a damaged row
 * means a cold refit, not a failed cycle. Rows of older state files (JSON text) decode the same way.
 */
import type { Logger } from 'pino';
import type { StateStore } from '../store/state.ts';
import type { ForecastBatch } from '../store/types.ts';
import { decodeFittedForecaster, encodeFittedForecaster, type FittedForecaster, type StoredForecaster } from '../forecast/engine.ts';
import { describeError } from './errors.ts';
import type { CycleState, IssuedStep, PoolAddition } from './ports.ts';
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
/** Residuals added since the pool under POOL_KEY was written (appended each cycle, folded in now and then). */
const POOL_ADDED_KEY = (s: string) => `residual-pool-added:${s}`;

/**
 * A residual pool as stored by earlier versions (JSON text in kv, still read): one kv row per
 * series instead of one SQLite row per residual, values as base64 float64, phases as base64 uint16.
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

/** The v1 (JSON + base64) form; kept so tests can write state files as earlier versions did. */
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

/** "RCRP": radcast residual pool, packed. */
const POOL_MAGIC = 0x50524352;
const POOL_VERSION = 2;
/** magic, version, horizon, phases, capacityPerLead (u32 each), dropped (f64), phase coding (u32). */
const POOL_PREFIX = 32;
/** Phase coding: one uint16 per residual. */
const PHASES_PLAIN = 0;
/** Phase coding: runs of consecutive phases (p, p + 1, ... mod phases) as (u16 first, u32 length). */
const PHASES_RUNS = 1;

/** Runs of consecutive phases within one lead: [first, length, first, length, ...]. */
function phaseRuns(list: readonly number[], phases: number): number[] {
  const runs: number[] = [];
  for (let i = 0; i < list.length; ) {
    let j = i + 1;
    while (j < list.length && list[j] === (list[j - 1] + 1) % phases) j++;
    runs.push(list[i], j - i);
    i = j;
  }
  return runs;
}

/**
 * A residual pool as bytes (a kv BLOB): the shape, the count per lead, the residuals as raw
 * float64 (exact), then the origin phases. Residuals of one lead come from consecutive hourly
 * cycles, so their phases are mostly one run (p, p + 1, ...): stored as runs when that is
 * shorter, else one uint16 each. All numbers little-endian.
 */
export function packPool(pool: ResidualPool): Uint8Array {
  const H = pool.horizon;
  const counts = pool.byLead.map((l) => l.length);
  const n = counts.reduce((a, b) => a + b, 0);
  const runs = pool.phaseByLead.map((l) => phaseRuns(l, pool.phases));
  const nRuns = runs.reduce((a, r) => a + r.length / 2, 0);
  const coding = nRuns * 6 + 4 * H < 2 * n ? PHASES_RUNS : PHASES_PLAIN;
  const valuesAt = POOL_PREFIX + 4 * H;
  const phasesAt = valuesAt + 8 * n;
  const size = phasesAt + (coding === PHASES_RUNS ? 4 * H + 6 * nRuns : 2 * n);
  const out = new Uint8Array(size);
  const v = new DataView(out.buffer);
  v.setUint32(0, POOL_MAGIC, true);
  v.setUint32(4, POOL_VERSION, true);
  v.setUint32(8, H, true);
  v.setUint32(12, pool.phases, true);
  v.setUint32(16, pool.capacityPerLead, true);
  v.setFloat64(20, pool.dropped, true);
  v.setUint32(28, coding, true);
  let at = valuesAt;
  for (let h = 0; h < H; h++) v.setUint32(POOL_PREFIX + 4 * h, counts[h], true);
  for (const list of pool.byLead) for (let i = 0; i < list.length; i++, at += 8) v.setFloat64(at, list[i], true);
  if (coding === PHASES_RUNS) {
    for (let h = 0; h < H; h++, at += 4) v.setUint32(at, runs[h].length / 2, true);
    for (const r of runs) {
      for (let i = 0; i < r.length; i += 2, at += 6) {
        v.setUint16(at, r[i], true);
        v.setUint32(at + 2, r[i + 1], true);
      }
    }
  } else {
    for (const list of pool.phaseByLead) for (let i = 0; i < list.length; i++, at += 2) v.setUint16(at, list[i] ?? 0, true);
  }
  return out;
}

/** null when the bytes are not a readable packed pool. */
export function unpackPool(b: Uint8Array): ResidualPool | null {
  if (b.length < POOL_PREFIX) return null;
  const v = new DataView(b.buffer, b.byteOffset, b.byteLength);
  if (v.getUint32(0, true) !== POOL_MAGIC || v.getUint32(4, true) !== POOL_VERSION) return null;
  const H = v.getUint32(8, true);
  const phases = v.getUint32(12, true);
  const capacity = v.getUint32(16, true);
  const coding = v.getUint32(28, true);
  if (H < 1 || phases < 1 || capacity < 1 || b.length < POOL_PREFIX + 4 * H) return null;
  const counts: number[] = [];
  for (let h = 0; h < H; h++) counts.push(v.getUint32(POOL_PREFIX + 4 * h, true));
  const n = counts.reduce((a, c) => a + c, 0);
  const valuesAt = POOL_PREFIX + 4 * H;
  let at = valuesAt + 8 * n;
  if (at > b.length) return null;
  const pool = createResidualPool(H, capacity, phases);
  pool.dropped = v.getFloat64(20, true);
  let k = valuesAt;
  for (let h = 0; h < H; h++) {
    const list = pool.byLead[h];
    for (let i = 0; i < counts[h]; i++, k += 8) list.push(v.getFloat64(k, true));
  }
  if (coding === PHASES_RUNS) {
    if (at + 4 * H > b.length) return null;
    const nRuns: number[] = [];
    for (let h = 0; h < H; h++, at += 4) nRuns.push(v.getUint32(at, true));
    if (at + 6 * nRuns.reduce((a, c) => a + c, 0) !== b.length) return null;
    for (let h = 0; h < H; h++) {
      const list = pool.phaseByLead[h];
      for (let r = 0; r < nRuns[h]; r++, at += 6) {
        let p = v.getUint16(at, true);
        const len = v.getUint32(at + 2, true);
        if (p >= phases || list.length + len > counts[h]) return null;
        for (let i = 0; i < len; i++, p = (p + 1) % phases) list.push(p);
      }
      if (list.length !== counts[h]) return null;
    }
  } else if (coding === PHASES_PLAIN) {
    if (at + 2 * n !== b.length) return null;
    for (let h = 0; h < H; h++) {
      const list = pool.phaseByLead[h];
      for (let i = 0; i < counts[h]; i++, at += 2) list.push(v.getUint16(at, true));
    }
  } else {
    return null;
  }
  return pool;
}

/** "RCRA": radcast residual pool additions. */
const ADDED_MAGIC = 0x41524352;
const ADDED_VERSION = 1;
const ADDED_PREFIX = 12;
/** Bytes per addition: u16 lead, u16 phase, f64 residual. */
const ADDED_ENTRY = 12;

/**
 * Residual additions as bytes: "RCRA", u32 version, u32 count, then per addition u16 lead, u16
 * phase, f64 residual (little-endian). `before` (earlier additions, same form) is kept in front.
 */
export function packAdditions(added: readonly PoolAddition[], before?: Uint8Array): Uint8Array {
  const n0 = before ? Math.max(0, additionsCount(before)) : 0;
  const out = new Uint8Array(ADDED_PREFIX + ADDED_ENTRY * (n0 + added.length));
  const v = new DataView(out.buffer);
  v.setUint32(0, ADDED_MAGIC, true);
  v.setUint32(4, ADDED_VERSION, true);
  v.setUint32(8, n0 + added.length, true);
  if (before && n0 > 0) out.set(before.subarray(ADDED_PREFIX, ADDED_PREFIX + ADDED_ENTRY * n0), ADDED_PREFIX);
  let at = ADDED_PREFIX + ADDED_ENTRY * n0;
  for (const a of added) {
    v.setUint16(at, a.lead, true);
    v.setUint16(at + 2, a.phase, true);
    v.setFloat64(at + 4, a.residual, true);
    at += ADDED_ENTRY;
  }
  return out;
}

/** Number of additions in the bytes; -1 when they are not readable additions. */
function additionsCount(b: Uint8Array): number {
  if (b.length < ADDED_PREFIX) return -1;
  const v = new DataView(b.buffer, b.byteOffset, b.byteLength);
  if (v.getUint32(0, true) !== ADDED_MAGIC || v.getUint32(4, true) !== ADDED_VERSION) return -1;
  const n = v.getUint32(8, true);
  return b.length === ADDED_PREFIX + ADDED_ENTRY * n ? n : -1;
}

/** null when the bytes are not readable additions. */
export function unpackAdditions(b: Uint8Array): PoolAddition[] | null {
  const n = additionsCount(b);
  if (n < 0) return null;
  const v = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const out: PoolAddition[] = [];
  for (let i = 0, at = ADDED_PREFIX; i < n; i++, at += ADDED_ENTRY) out.push({ lead: v.getUint16(at, true), phase: v.getUint16(at + 2, true), residual: v.getFloat64(at + 4, true) });
  return out;
}

/**
 * Adds the residuals to the pool with the result of addResiduals(pool, lead, [residual], phase)
 * called for each in order, but trimming each lead once at the end: the newest capacityPerLead
 * are kept and the drop count grows by the same total either way. false (pool unchanged) when an
 * addition does not fit the pool (lead or phase out of range).
 */
export function applyAdditions(pool: ResidualPool, added: readonly PoolAddition[]): boolean {
  const P = pool.phases;
  for (const a of added) if (!Number.isInteger(a.lead) || a.lead < 1 || a.lead > pool.horizon || !(a.phase >= 0 && a.phase < Math.max(P, 1))) return false;
  const grown = new Set<number>();
  for (const a of added) {
    if (!Number.isFinite(a.residual)) continue;
    pool.byLead[a.lead - 1].push(a.residual);
    pool.phaseByLead[a.lead - 1].push(P > 1 ? a.phase : 0);
    grown.add(a.lead - 1);
  }
  for (const h of grown) {
    const over = pool.byLead[h].length - pool.capacityPerLead;
    if (over > 0) {
      pool.byLead[h].splice(0, over);
      pool.phaseByLead[h].splice(0, over);
      pool.dropped += over;
    }
  }
  return true;
}

/** Most additions kept beside a pool before it is rewritten whole: an eighth of its size (at least 4 per lead). */
function additionsLimit(pool: ResidualPool): number {
  let n = 0;
  for (const l of pool.byLead) n += l.length;
  return Math.max(4 * pool.horizon, Math.floor(n / 8));
}

/** A pool stored as JSON text by an earlier version (v1, base64 arrays). */
function decodeJsonPool(text: string): ResidualPool | null {
  try {
    return decodePool(JSON.parse(text) as EncodedPool);
  } catch {
    return null;
  }
}

export class StateAdapter implements CycleState {
  readonly store: StateStore;
  readonly #logger: Logger;
  /** Step of a series (to read residual rows of older state files); unset = those rows are ignored. */
  readonly #stepOf: ((series: string) => number) | undefined;
  /** Series whose stored pool was read back whole in this process: additions may be appended to it. */
  readonly #poolBase = new Map<string, { horizon: number; phases: number; capacityPerLead: number; logCount: number }>();

  constructor(store: StateStore, logger: Logger, opts: { stepOf?: (series: string) => number } = {}) {
    this.store = store;
    this.#logger = logger;
    this.#stepOf = opts.stepOf;
  }

  async getStoredModel(series: string): Promise<StoredForecaster | null> {
    return this.store.loadModelStored(series)?.stored ?? null;
  }

  async putStoredModel(series: string, stored: Uint8Array, atMs: number): Promise<void> {
    this.store.saveModel(series, stored, atMs);
  }

  /** The stored model decoded and checked here (tools, tests); null with a warning when it is damaged. */
  async getModel(series: string): Promise<FittedForecaster | null> {
    const stored = await this.getStoredModel(series);
    if (stored === null) return null;
    try {
      return decodeFittedForecaster(stored, series);
    } catch (err) {
      const e = describeError(err);
      this.#logger.warn({ series, code: e.code, err: e.message }, 'stored model unusable; refitting cold');
      return null;
    }
  }

  async putModel(series: string, fitted: FittedForecaster, atMs: number): Promise<void> {
    await this.putStoredModel(series, encodeFittedForecaster(fitted), atMs);
  }

  /**
   * The pool is kept as a packed pool plus the residuals added since it was written (a small
   * row appended each cycle); every so often (additionsLimit) the pool is written whole again.
   * A cycle then writes a few hundred bytes instead of the whole pool (tens of kB).
   */
  async getResidualPool(series: string, shape: { horizon: number; phases: number; capacityPerLead: number }): Promise<ResidualPool> {
    this.#poolBase.delete(series);
    const stored = this.store.getStored(POOL_KEY(series));
    if (stored !== undefined) {
      const pool = typeof stored === 'string' ? decodeJsonPool(stored) : unpackPool(stored);
      if (pool && pool.horizon === shape.horizon && pool.phases === shape.phases) {
        let logCount = 0;
        const log = typeof stored === 'string' ? undefined : this.store.getStored(POOL_ADDED_KEY(series));
        if (log !== undefined) {
          const added = log instanceof Uint8Array ? unpackAdditions(log) : null;
          if (added && applyAdditions(pool, added)) logCount = added.length;
          else this.#logger.warn({ series, code: 'STATE_POOL_UNREADABLE' }, 'stored band residuals of the latest cycles unreadable; they are left out of the bands');
        }
        const sameCapacity = pool.capacityPerLead === shape.capacityPerLead;
        pool.capacityPerLead = shape.capacityPerLead;
        for (let i = 0; i < pool.byLead.length; i++) {
          const over = pool.byLead[i].length - shape.capacityPerLead;
          if (over > 0) {
            pool.byLead[i].splice(0, over);
            pool.phaseByLead[i].splice(0, over);
          }
        }
        // Appending is right only onto a packed pool of this shape whose additions all read back.
        if (typeof stored !== 'string' && sameCapacity && (log === undefined || logCount > 0)) this.#poolBase.set(series, { horizon: shape.horizon, phases: shape.phases, capacityPerLead: shape.capacityPerLead, logCount });
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

  async putResidualPool(series: string, pool: ResidualPool, added?: readonly PoolAddition[]): Promise<void> {
    const now = Date.now();
    const base = this.#poolBase.get(series);
    if (added && base && base.horizon === pool.horizon && base.phases === pool.phases && base.capacityPerLead === pool.capacityPerLead && base.logCount + added.length <= additionsLimit(pool)) {
      if (added.length === 0) return;
      const before = base.logCount > 0 ? this.store.getStored(POOL_ADDED_KEY(series)) : undefined;
      // The additions row must still be the one read with the pool (else: rewrite the whole pool).
      if (base.logCount === 0 || (before instanceof Uint8Array && additionsCount(before) === base.logCount)) {
        this.store.setBytes(POOL_ADDED_KEY(series), packAdditions(added, before instanceof Uint8Array ? before : undefined), now);
        base.logCount += added.length;
        return;
      }
    }
    // The whole pool, and no additions beside it (one commit, so a crash leaves one or the other).
    const bytes = packPool(pool);
    this.store.transaction(() => {
      this.store.setBytes(POOL_KEY(series), bytes, now);
      this.store.deleteJson(POOL_ADDED_KEY(series));
    });
    this.#poolBase.set(series, { horizon: pool.horizon, phases: pool.phases, capacityPerLead: pool.capacityPerLead, logCount: 0 });
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
