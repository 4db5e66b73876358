/**
 * Prediction bands per lead time from out-of-sample residuals (empirical, split-conformal style).
 *
 * A residual is actual - forecast of a matured forecast (or of a hold-out forecast made before the
 * origin). For lead h and quantile q the band is forecast + Q_q(residuals at lead h), where Q_q is
 * the split-conformal order statistic (Lei, G'Sell, Rinaldo, Tibshirani & Wasserman 2018,
 * "Distribution-free predictive inference for regression", JASA 113(523)): with n residuals sorted
 * ascending, the ceil((n + 1) q)-th for q >= 0.5 and the floor((n + 1) q)-th for q < 0.5, clamped
 * to 1..n. Under exchangeability each one-sided band then holds with probability >= q (upper) or
 * <= q (lower), so the central band has coverage >= upper - lower.
 *
 * The pool is plain JSON-able data so the daemon can keep it in its state store and refresh it as
 * forecasts mature; it is bounded per lead and drops the oldest residuals first (drops counted).
 */
import { quantileKey } from './metrics.ts';

export interface ResidualPool {
  version: 1;
  horizon: number;
  /** Most residuals kept per lead; older ones are dropped first. */
  capacityPerLead: number;
  /** byLead[h - 1]: residuals (actual - forecast) at lead h, oldest first. */
  byLead: number[][];
  /** Residuals dropped because a lead was full (kept for logs and metrics). */
  dropped: number;
}

/** Default bound on residuals kept per lead (about four months of daily origins). */
export const DEFAULT_RESIDUAL_CAPACITY = 120;
/** Fewest residuals a lead needs before its own band is used; below this, neighbouring leads are pooled. */
export const DEFAULT_MIN_RESIDUALS_PER_LEAD = 30;

export function createResidualPool(horizon: number, capacityPerLead = DEFAULT_RESIDUAL_CAPACITY): ResidualPool {
  if (!Number.isInteger(horizon) || horizon < 1) throw new RangeError(`horizon must be a positive integer, got ${horizon}`);
  if (!Number.isInteger(capacityPerLead) || capacityPerLead < 1) throw new RangeError(`capacityPerLead must be a positive integer, got ${capacityPerLead}`);
  return { version: 1, horizon, capacityPerLead, byLead: Array.from({ length: horizon }, () => []), dropped: 0 };
}

/** Appends residuals for one lead (1..H), skipping non-finite ones; returns how many were dropped for space. */
export function addResiduals(pool: ResidualPool, lead: number, residuals: ArrayLike<number>): number {
  if (!Number.isInteger(lead) || lead < 1 || lead > pool.horizon) throw new RangeError(`lead must be in 1..${pool.horizon}, got ${lead}`);
  const list = pool.byLead[lead - 1];
  for (let i = 0; i < residuals.length; i++) {
    const r = residuals[i];
    if (Number.isFinite(r)) list.push(r);
  }
  const over = list.length - pool.capacityPerLead;
  if (over > 0) {
    list.splice(0, over);
    pool.dropped += over;
    return over;
  }
  return 0;
}

/** Adds the residuals of one whole forecast: actual[h] - forecast[h] at lead h + 1. */
export function addForecastResiduals(pool: ResidualPool, actual: ArrayLike<number>, forecast: ArrayLike<number>): number {
  let dropped = 0;
  const h = Math.min(pool.horizon, actual.length, forecast.length);
  for (let i = 0; i < h; i++) dropped += addResiduals(pool, i + 1, [actual[i] - forecast[i]]);
  return dropped;
}

/** Split-conformal order statistic of ascending-sorted residuals (see the module comment). */
export function conformalQuantile(sorted: ArrayLike<number>, q: number): number {
  const n = sorted.length;
  if (n === 0) return Number.NaN;
  const rank = q >= 0.5 ? Math.ceil((n + 1) * q) : Math.floor((n + 1) * q);
  const k = Math.min(n, Math.max(1, rank));
  return sorted[k - 1];
}

export interface BandOffsets {
  quantiles: number[];
  /** offsets[i][h]: add to the point forecast at lead h + 1 to get the band of quantiles[i]; NaN = no band. */
  offsets: Float64Array[];
  /** Residuals behind each lead's band (after pooling). */
  nUsed: Int32Array;
  /** Half-width of the lead neighbourhood pooled for each lead (0 = its own residuals only). */
  poolRadius: Int32Array;
}

export interface BandOptions {
  /** Fewest residuals per lead before pooling with neighbouring leads (default 30). */
  minPerLead?: number;
  /** Fewest residuals (after pooling) for any band at all; below it the band is NaN (default 8). */
  minTotal?: number;
}

/**
 * Band offsets per lead. A lead with fewer than minPerLead residuals borrows from the leads
 * h +- 1, h +- 2, ... until it has enough (errors of neighbouring leads have similar spread);
 * with fewer than minTotal in the whole pool, no band is given (NaN) rather than a made-up one.
 */
export function bandOffsets(pool: ResidualPool, quantiles: readonly number[], opts: BandOptions = {}): BandOffsets {
  const minPerLead = opts.minPerLead ?? DEFAULT_MIN_RESIDUALS_PER_LEAD;
  const minTotal = opts.minTotal ?? 8;
  const H = pool.horizon;
  const offsets = quantiles.map(() => new Float64Array(H).fill(Number.NaN));
  const nUsed = new Int32Array(H);
  const poolRadius = new Int32Array(H);
  const sortedByLead = pool.byLead.map((l) => Float64Array.from(l).sort());
  for (let h = 0; h < H; h++) {
    let radius = 0;
    let parts: Float64Array[] = [sortedByLead[h]];
    let count = sortedByLead[h].length;
    while (count < minPerLead && radius < H) {
      radius++;
      const extra: Float64Array[] = [];
      if (h - radius >= 0) extra.push(sortedByLead[h - radius]);
      if (h + radius < H) extra.push(sortedByLead[h + radius]);
      if (extra.length === 0) break;
      parts = parts.concat(extra);
      count += extra.reduce((s, a) => s + a.length, 0);
    }
    nUsed[h] = count;
    poolRadius[h] = radius;
    if (count < minTotal) continue;
    const merged = new Float64Array(count);
    let at = 0;
    for (const p of parts) {
      merged.set(p, at);
      at += p.length;
    }
    if (parts.length > 1) merged.sort();
    for (let i = 0; i < quantiles.length; i++) offsets[i][h] = conformalQuantile(merged, quantiles[i]);
  }
  return { quantiles: [...quantiles], offsets, nUsed, poolRadius };
}

/** Band values: bands[i][h] = values[h] + offsets[i][h]. */
export function applyBands(values: ArrayLike<number>, band: BandOffsets): Float64Array[] {
  return band.offsets.map((off) => {
    const out = new Float64Array(values.length);
    for (let h = 0; h < values.length; h++) out[h] = values[h] + (h < off.length ? off[h] : Number.NaN);
    return out;
  });
}

/**
 * What the daemon calls: point forecast + stored residuals -> band values per lead, keyed by
 * quantile ("0.1" -> value) as the store's ForecastPoint.bands expects. Leads without a band get
 * an empty record.
 */
export function bandsForForecast(values: ArrayLike<number>, pool: ResidualPool, quantiles: readonly number[], opts: BandOptions = {}): Array<Record<string, number>> {
  const band = bandOffsets(pool, quantiles, opts);
  const bands = applyBands(values, band);
  const out: Array<Record<string, number>> = [];
  for (let h = 0; h < values.length; h++) {
    const rec: Record<string, number> = {};
    for (let i = 0; i < quantiles.length; i++) {
      const v = bands[i][h];
      if (Number.isFinite(v)) rec[quantileKey(quantiles[i])] = v;
    }
    out.push(rec);
  }
  return out;
}
