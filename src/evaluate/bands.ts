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
 * Residuals are kept relative to a scale of their origin (bandScale: the in-sample mean absolute
 * seasonal difference of the origin's training window, the MASE scale) and the offsets are
 * multiplied by the scale at the new origin: errors of loads grow with the load, and a pool
 * filled in autumn would otherwise give winter bands that are too narrow. This is the normalised
 * variant of split-conformal prediction (Papadopoulos, Gammerman & Vovk 2008; locally weighted
 * conformal inference in Lei et al. 2018, section 5.2). Pass scale 1 to get plain residuals.
 *
 * The pool is plain JSON-able data so the daemon can keep it in its state store and refresh it as
 * forecasts mature; it is bounded per lead and drops the oldest residuals first (drops counted).
 */
import { quantileKey, seasonalScale } from './metrics.ts';

export interface ResidualPool {
  version: 2;
  horizon: number;
  /**
   * Phases of the origin within the season (e.g. 24 hours of the day for an hourly series with a
   * daily season): errors depend on the hour a forecast is issued at, so bands prefer residuals of
   * origins at the same phase. 1 = no phases.
   */
  phases: number;
  /** Most residuals kept per lead; older ones are dropped first. */
  capacityPerLead: number;
  /** byLead[h - 1]: residuals (actual - forecast) at lead h, oldest first. */
  byLead: number[][];
  /** phaseByLead[h - 1][i]: origin phase of byLead[h - 1][i]. */
  phaseByLead: number[][];
  /** Residuals dropped because a lead was full (kept for logs and metrics). */
  dropped: number;
}

/**
 * Default bound on residuals kept per lead: two weeks of hourly forecasts. Shorter pools can miss
 * whole weekdays (a five-day pool of hourly residuals may hold no weekend), which shows up as
 * bands that are too narrow on the days the pool did not see.
 */
export const DEFAULT_RESIDUAL_CAPACITY = 336;
/** Fewest residuals a band is formed from; below this, neighbouring phases, then leads, are pooled. */
export const DEFAULT_MIN_RESIDUALS_PER_LEAD = 30;

export function createResidualPool(horizon: number, capacityPerLead = DEFAULT_RESIDUAL_CAPACITY, phases = 1): ResidualPool {
  if (!Number.isInteger(horizon) || horizon < 1) throw new RangeError(`horizon must be a positive integer, got ${horizon}`);
  if (!Number.isInteger(capacityPerLead) || capacityPerLead < 1) throw new RangeError(`capacityPerLead must be a positive integer, got ${capacityPerLead}`);
  if (!Number.isInteger(phases) || phases < 1) throw new RangeError(`phases must be a positive integer, got ${phases}`);
  return {
    version: 2,
    horizon,
    phases,
    capacityPerLead,
    byLead: Array.from({ length: horizon }, () => []),
    phaseByLead: Array.from({ length: horizon }, () => []),
    dropped: 0,
  };
}

/**
 * Phase of a forecast origin within the season: the step of the season the origin falls on,
 * counted from the Unix epoch (0 .. phases - 1). Origins one season apart share a phase.
 */
export function originPhase(originMs: number, stepMs: number, phases: number): number {
  if (phases <= 1) return 0;
  const step = Math.floor(originMs / stepMs);
  return ((step % phases) + phases) % phases;
}

/** Appends residuals of origins at `phase` for one lead (1..H), skipping non-finite ones; returns how many were dropped for space. */
export function addResiduals(pool: ResidualPool, lead: number, residuals: ArrayLike<number>, phase = 0): number {
  if (!Number.isInteger(lead) || lead < 1 || lead > pool.horizon) throw new RangeError(`lead must be in 1..${pool.horizon}, got ${lead}`);
  const list = pool.byLead[lead - 1];
  const phaseList = pool.phaseByLead[lead - 1];
  const p = pool.phases > 1 ? ((Math.floor(phase) % pool.phases) + pool.phases) % pool.phases : 0;
  for (let i = 0; i < residuals.length; i++) {
    const r = residuals[i];
    if (Number.isFinite(r)) {
      list.push(r);
      phaseList.push(p);
    }
  }
  const over = list.length - pool.capacityPerLead;
  if (over > 0) {
    list.splice(0, over);
    phaseList.splice(0, over);
    pool.dropped += over;
    return over;
  }
  return 0;
}

/** Adds the residuals of one whole forecast issued at `phase`: actual[h] - forecast[h] at lead h + 1. */
export function addForecastResiduals(pool: ResidualPool, actual: ArrayLike<number>, forecast: ArrayLike<number>, phase = 0): number {
  let dropped = 0;
  const h = Math.min(pool.horizon, actual.length, forecast.length);
  for (let i = 0; i < h; i++) dropped += addResiduals(pool, i + 1, [actual[i] - forecast[i]], phase);
  return dropped;
}

/**
 * Normaliser of the residuals of a forecast from `originIndex`: the mean absolute seasonal
 * difference over its training window (the MASE scale); 1 when that is not a positive number
 * (constant or too short series), so bands never vanish or blow up.
 */
export function bandScale(values: ArrayLike<number>, originIndex: number, windowSteps: number, seasonSteps: number): number {
  const s = seasonalScale(values, originIndex - windowSteps + 1, originIndex, Math.max(1, seasonSteps)).scale;
  return Number.isFinite(s) && s > 0 ? s : 1;
}

/** Offsets multiplied by the scale at the new origin (residuals were stored divided by theirs). */
export function scaleOffsets(band: BandOffsets, scale: number): BandOffsets {
  return { ...band, offsets: band.offsets.map((o) => o.map((v) => v * scale)) };
}

/** A stored residual: lead, target time (epoch ms) and actual - forecast (divided by `scale` when given). */
export interface ResidualRow {
  lead: number;
  t: number;
  residual: number;
  /** bandScale of the forecast's origin; the pool keeps residual / scale. */
  scale?: number;
}

/**
 * Builds a pool from stored rows (oldest first), deriving each row's origin phase from its target
 * time: origin = t - lead * stepMs. This is how the daemon turns its residual table into bands.
 */
export function residualPoolFromRows(rows: readonly ResidualRow[], opts: { horizon: number; stepMs: number; phases?: number; capacityPerLead?: number }): ResidualPool {
  const pool = createResidualPool(opts.horizon, opts.capacityPerLead ?? DEFAULT_RESIDUAL_CAPACITY, opts.phases ?? 1);
  for (const r of rows) {
    if (!Number.isInteger(r.lead) || r.lead < 1 || r.lead > opts.horizon) continue;
    const sc = r.scale !== undefined && Number.isFinite(r.scale) && r.scale > 0 ? r.scale : 1;
    addResiduals(pool, r.lead, [r.residual / sc], originPhase(r.t - r.lead * opts.stepMs, opts.stepMs, pool.phases));
  }
  return pool;
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
  /** Half-width of the lead neighbourhood pooled for each lead (0 = its own lead only). */
  poolRadius: Int32Array;
  /** Half-width of the phase neighbourhood pooled for each lead (0 = the origin's own phase only). */
  phaseRadius: Int32Array;
}

export interface BandOptions {
  /** Fewest residuals per band before pooling neighbouring phases, then leads (default 30). */
  minPerLead?: number;
  /** Fewest residuals (after pooling) for any band at all; below it the band is NaN (default 8). */
  minTotal?: number;
}

/**
 * Band offsets per lead for a forecast issued at `phase`. Residuals of the same lead and phase
 * come first; while fewer than minPerLead, the phase neighbourhood widens (phase +- 1, +- 2, ...,
 * circular) up to all phases, then neighbouring leads are added (h +- 1, ...; errors of
 * neighbouring leads have similar spread). With fewer than minTotal in the end, no band is given
 * (NaN) rather than a made-up one.
 */
export function bandOffsets(pool: ResidualPool, quantiles: readonly number[], opts: BandOptions & { phase?: number } = {}): BandOffsets {
  const minPerLead = opts.minPerLead ?? DEFAULT_MIN_RESIDUALS_PER_LEAD;
  const minTotal = opts.minTotal ?? 8;
  const H = pool.horizon;
  const P = pool.phases;
  const phase = P > 1 ? ((Math.floor(opts.phase ?? 0) % P) + P) % P : 0;
  const maxPhaseRadius = Math.floor(P / 2);
  const offsets = quantiles.map(() => new Float64Array(H).fill(Number.NaN));
  const nUsed = new Int32Array(H);
  const poolRadius = new Int32Array(H);
  const phaseRadius = new Int32Array(H);
  // Residuals of every lead bucketed by circular phase distance to the wanted phase.
  const byDist: number[][][] = pool.byLead.map((list, h) => {
    const buckets: number[][] = Array.from({ length: maxPhaseRadius + 1 }, () => []);
    const ph = pool.phaseByLead[h];
    for (let i = 0; i < list.length; i++) {
      const d0 = Math.abs((ph[i] ?? 0) - phase);
      buckets[Math.min(d0, P - d0)].push(list[i]);
    }
    return buckets;
  });
  for (let h = 0; h < H; h++) {
    const chosen: number[] = [];
    let rp = 0;
    for (; rp <= maxPhaseRadius; rp++) {
      for (const r of byDist[h][rp]) chosen.push(r);
      if (chosen.length >= minPerLead) break;
    }
    rp = Math.min(rp, maxPhaseRadius);
    let rl = 0;
    while (chosen.length < minPerLead && rl < H) {
      rl++;
      let added = false;
      for (const hh of [h - rl, h + rl]) {
        if (hh < 0 || hh >= H) continue;
        added = true;
        for (const b of byDist[hh]) for (const r of b) chosen.push(r);
      }
      if (!added) break;
    }
    nUsed[h] = chosen.length;
    poolRadius[h] = rl;
    phaseRadius[h] = rp;
    if (chosen.length < minTotal) continue;
    const sorted = Float64Array.from(chosen).sort();
    for (let i = 0; i < quantiles.length; i++) offsets[i][h] = conformalQuantile(sorted, quantiles[i]);
  }
  return { quantiles: [...quantiles], offsets, nUsed, poolRadius, phaseRadius };
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
 * quantile ("0.1" -> value) as the store's ForecastPoint.bands expects; pass the origin's phase
 * (originPhase) when the pool has phases, and its bandScale when the pool holds scaled residuals.
 * Leads without a band get an empty record.
 */
export function bandsForForecast(values: ArrayLike<number>, pool: ResidualPool, quantiles: readonly number[], opts: BandOptions & { phase?: number; scale?: number } = {}): Array<Record<string, number>> {
  const band = scaleOffsets(bandOffsets(pool, quantiles, opts), opts.scale ?? 1);
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
