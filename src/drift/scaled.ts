/**
 * Scaled errors of matured forecasts and their grouping into one observation per target step.
 *
 * scaled error = |actual - forecast| / scale, where scale is the series' MASE scale: the in-sample
 * mean absolute seasonal difference (Hyndman, R. J. & Koehler, A. B. 2006, "Another look at
 * measures of forecast accuracy", International Journal of Forecasting 22(4), 679-688). The mean
 * of scaled errors over a set of forecasts is their MASE, so thresholds mean the same on every series.
 */

/** One matured forecast (issued at some origin for lead `lead`, target time `t`). */
export interface MaturedError {
  /** Target time (epoch ms). */
  t: number;
  /** Lead time in steps, 1..H. */
  lead: number;
  /** |actual - forecast| / MASE scale. */
  scaledError: number;
}

/** |actual - forecast| / scale; NaN when any input is not finite or the scale is not positive. */
export function scaledError(actual: number, forecast: number, scale: number): number {
  if (!Number.isFinite(actual) || !Number.isFinite(forecast) || !Number.isFinite(scale) || scale <= 0) return Number.NaN;
  return Math.abs(actual - forecast) / scale;
}

/** One observation of the detector: everything that matured for one target time. */
export interface TargetObservation {
  t: number;
  /** Mean over the matured leads of scaledError / baseline(lead). */
  ratio: number;
  /** Sum and count of the raw scaled errors (for the recent MASE). */
  errorSum: number;
  count: number;
}

export interface GroupResult {
  observations: TargetObservation[];
  /** Entries with a non-finite or negative scaled error, or a lead that is not a positive integer. */
  invalid: number;
  /** Entries at or before `after` (already consumed in an earlier cycle). */
  stale: number;
}

/**
 * Group matured errors by target time, oldest first, dropping those at or before `after`.
 * `baselineFor(lead)` gives the reference MASE for a lead (> 0); entries whose baseline is not
 * usable are counted in the recent MASE but not in the ratio (ratio NaN when none is usable).
 */
export function groupByTarget(items: readonly MaturedError[], after: number | null, baselineFor: (lead: number) => number): GroupResult {
  let invalid = 0;
  let stale = 0;
  const byT = new Map<number, { ratioSum: number; ratioN: number; errorSum: number; count: number }>();
  for (const it of items) {
    if (!it || !Number.isFinite(it.t) || !Number.isInteger(it.lead) || it.lead < 1 || !Number.isFinite(it.scaledError) || it.scaledError < 0) {
      invalid++;
      continue;
    }
    if (after !== null && it.t <= after) {
      stale++;
      continue;
    }
    let g = byT.get(it.t);
    if (!g) {
      g = { ratioSum: 0, ratioN: 0, errorSum: 0, count: 0 };
      byT.set(it.t, g);
    }
    g.errorSum += it.scaledError;
    g.count++;
    const base = baselineFor(it.lead);
    if (Number.isFinite(base) && base > 0) {
      g.ratioSum += it.scaledError / base;
      g.ratioN++;
    }
  }
  const observations: TargetObservation[] = [...byT.entries()]
    .sort((a, b) => a[0] - b[0])
    .map(([t, g]) => ({ t, ratio: g.ratioN > 0 ? g.ratioSum / g.ratioN : Number.NaN, errorSum: g.errorSum, count: g.count }));
  return { observations, invalid, stale };
}
