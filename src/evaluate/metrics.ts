/**
 * Accuracy metrics of point forecasts and quantile bands.
 *
 * Error convention (Hyndman & Koehler 2006, "Another look at measures of forecast accuracy",
 * Int. J. Forecasting 22(4), 679-688): e = actual - forecast. A positive bias therefore means the
 * forecasts were too low on average.
 *
 * MASE (same paper, eq. for the scaled error q_t): each error is divided by the in-sample mean
 * absolute seasonal difference of the series, (1 / (n - m)) * sum_{t=m+1..n} |y_t - y_{t-m}|,
 * computed on the training window before the forecast origin, with the season m in steps.
 * MASE is the mean of |q_t|. Every output that carries a MASE also carries its m.
 */

/** One central interval formed by a lower quantile q and the upper quantile 1 - q. */
export interface IntervalScore {
  lower: number;
  upper: number;
  /** upper - lower, e.g. 0.8 for the 10%..90% band. */
  nominal: number;
  /** Share of scored actuals with lower <= actual <= upper; null when no band was available. */
  coverage: number | null;
  /** Mean of (upper band - lower band), in the series' units. */
  width: number | null;
  /** Points that had this band. */
  n: number;
}

export interface MetricSet {
  /** Points scored (finite actual and finite forecast). */
  n: number;
  /** Points skipped because the actual or the forecast was missing. */
  missing: number;
  mae: number | null;
  rmse: number | null;
  /** Mean absolute scaled error; null when no point had a positive finite scale. */
  mase: number | null;
  /** Mean error, actual - forecast (positive = forecasts too low). */
  bias: number | null;
  /** Coverage of the widest central interval (e.g. 10%..90%); null without bands. */
  coverage: number | null;
  nominalCoverage: number | null;
  /** Mean width of the widest central interval. */
  width: number | null;
  /** Mean pinball loss over all band quantiles and points (series units). */
  pinball: number | null;
  /** Mean pinball loss per quantile, keyed by the quantile as written in the config ("0.1"). */
  pinballByQuantile: Record<string, number | null>;
  /** Share of actuals below each quantile band (a calibrated q-band has about q below it). */
  belowByQuantile: Record<string, number | null>;
  intervals: IntervalScore[];
}

/** Quantile key as used in JSON and in the store ("0.1", "0.9"). */
export function quantileKey(q: number): string {
  return String(Number(q.toPrecision(12)));
}

/**
 * Pairs each quantile q < 0.5 with 1 - q when both are present: the central intervals.
 * Sorted from the widest to the narrowest.
 */
export function centralIntervals(quantiles: readonly number[]): Array<{ lowerIdx: number; upperIdx: number; lower: number; upper: number }> {
  const out: Array<{ lowerIdx: number; upperIdx: number; lower: number; upper: number }> = [];
  for (let i = 0; i < quantiles.length; i++) {
    const lo = quantiles[i];
    if (!(lo < 0.5)) continue;
    const j = quantiles.findIndex((q) => Math.abs(q - (1 - lo)) < 1e-9);
    if (j >= 0) out.push({ lowerIdx: i, upperIdx: j, lower: lo, upper: quantiles[j] });
  }
  out.sort((a, b) => a.lower - b.lower);
  return out;
}

/** Pinball (quantile) loss of one point: max(q (y - f), (q - 1)(y - f)). */
export function pinballLoss(actual: number, bandValue: number, q: number): number {
  const d = actual - bandValue;
  return d >= 0 ? q * d : (q - 1) * d;
}

export interface SeasonalScale {
  /** Mean absolute seasonal difference; NaN when fewer than one usable pair. */
  scale: number;
  /** Pairs (y_t, y_{t-m}) with both values finite. */
  pairs: number;
  m: number;
}

/**
 * In-sample MASE scale on values[from..to] (inclusive): (1 / pairs) * sum |y_t - y_{t-m}| over
 * t = from+m .. to with both values present (Hyndman & Koehler 2006; missing pairs skipped).
 */
export function seasonalScale(values: ArrayLike<number>, from: number, to: number, m: number): SeasonalScale {
  if (!Number.isInteger(m) || m < 1) throw new RangeError(`season m must be a positive integer, got ${m}`);
  const lo = Math.max(0, from);
  let sum = 0;
  let pairs = 0;
  for (let t = lo + m; t <= to; t++) {
    const a = values[t];
    const b = values[t - m];
    if (Number.isFinite(a) && Number.isFinite(b)) {
      sum += Math.abs(a - b);
      pairs++;
    }
  }
  return { scale: pairs > 0 ? sum / pairs : Number.NaN, pairs, m };
}

/**
 * Streaming accumulator for one group of forecast points (one method, overall or one lead or
 * one origin). Add points, read the MetricSet.
 */
export class MetricAccumulator {
  readonly quantiles: readonly number[];
  #n = 0;
  #missing = 0;
  #absSum = 0;
  #sqSum = 0;
  #errSum = 0;
  #scaledSum = 0;
  #scaledN = 0;
  #pinSum: Float64Array;
  #belowCount: Float64Array;
  #bandN: Float64Array;
  #intervals: ReturnType<typeof centralIntervals>;
  #inside: Float64Array;
  #widthSum: Float64Array;
  #intervalN: Float64Array;

  constructor(quantiles: readonly number[] = []) {
    this.quantiles = [...quantiles];
    this.#pinSum = new Float64Array(quantiles.length);
    this.#belowCount = new Float64Array(quantiles.length);
    this.#bandN = new Float64Array(quantiles.length);
    this.#intervals = centralIntervals(quantiles);
    this.#inside = new Float64Array(this.#intervals.length);
    this.#widthSum = new Float64Array(this.#intervals.length);
    this.#intervalN = new Float64Array(this.#intervals.length);
  }

  /**
   * Adds one point. `scale` is the MASE scale of the point's origin (NaN or <= 0 = not scaled);
   * `bands[i]` is the band value for quantiles[i] (omit or NaN = no band for this point).
   */
  add(actual: number, forecast: number, scale: number, bands?: ArrayLike<number>): void {
    if (!Number.isFinite(actual) || !Number.isFinite(forecast)) {
      this.#missing++;
      return;
    }
    const e = actual - forecast;
    this.#n++;
    this.#absSum += Math.abs(e);
    this.#sqSum += e * e;
    this.#errSum += e;
    if (Number.isFinite(scale) && scale > 0) {
      this.#scaledSum += Math.abs(e) / scale;
      this.#scaledN++;
    }
    if (!bands) return;
    for (let i = 0; i < this.quantiles.length; i++) {
      const b = bands[i];
      if (!Number.isFinite(b)) continue;
      this.#bandN[i]++;
      this.#pinSum[i] += pinballLoss(actual, b, this.quantiles[i]);
      if (actual < b) this.#belowCount[i]++;
    }
    for (let k = 0; k < this.#intervals.length; k++) {
      const lo = bands[this.#intervals[k].lowerIdx];
      const hi = bands[this.#intervals[k].upperIdx];
      if (!Number.isFinite(lo) || !Number.isFinite(hi)) continue;
      this.#intervalN[k]++;
      this.#widthSum[k] += hi - lo;
      if (actual >= lo && actual <= hi) this.#inside[k]++;
    }
  }

  result(): MetricSet {
    const n = this.#n;
    const pinballByQuantile: Record<string, number | null> = {};
    const belowByQuantile: Record<string, number | null> = {};
    let pinTotal = 0;
    let pinN = 0;
    for (let i = 0; i < this.quantiles.length; i++) {
      const key = quantileKey(this.quantiles[i]);
      const bn = this.#bandN[i];
      pinballByQuantile[key] = bn > 0 ? this.#pinSum[i] / bn : null;
      belowByQuantile[key] = bn > 0 ? this.#belowCount[i] / bn : null;
      pinTotal += this.#pinSum[i];
      pinN += bn;
    }
    const intervals: IntervalScore[] = this.#intervals.map((iv, k) => ({
      lower: iv.lower,
      upper: iv.upper,
      nominal: Number((iv.upper - iv.lower).toPrecision(12)),
      coverage: this.#intervalN[k] > 0 ? this.#inside[k] / this.#intervalN[k] : null,
      width: this.#intervalN[k] > 0 ? this.#widthSum[k] / this.#intervalN[k] : null,
      n: this.#intervalN[k],
    }));
    const widest = intervals[0];
    return {
      n,
      missing: this.#missing,
      mae: n > 0 ? this.#absSum / n : null,
      rmse: n > 0 ? Math.sqrt(this.#sqSum / n) : null,
      mase: this.#scaledN > 0 ? this.#scaledSum / this.#scaledN : null,
      bias: n > 0 ? this.#errSum / n : null,
      coverage: widest ? widest.coverage : null,
      nominalCoverage: widest ? widest.nominal : null,
      width: widest ? widest.width : null,
      pinball: pinN > 0 ? pinTotal / pinN : null,
      pinballByQuantile,
      belowByQuantile,
      intervals,
    };
  }
}

/** One scored forecast: H actuals, H point forecasts, optional H x nQuantiles bands. */
export interface ScoredForecast {
  actual: ArrayLike<number>;
  forecast: ArrayLike<number>;
  /** MASE scale of this forecast's origin (see seasonalScale). */
  scale: number;
  /** bands[q][h]: band value of quantile q at lead h+1. */
  bands?: ArrayLike<number>[];
}

export interface ScoreSummary {
  /** Season m (steps) of the MASE scale. */
  season: number;
  horizon: number;
  overall: MetricSet;
  /** byLead[h - 1] for lead h = 1..H. */
  byLead: MetricSet[];
  /** One entry per forecast, in input order. */
  byForecast: MetricSet[];
}

/** Scores many H-step forecasts overall, per lead time and per forecast (origin). */
export function scoreForecasts(forecasts: readonly ScoredForecast[], horizon: number, quantiles: readonly number[], season: number): ScoreSummary {
  const overall = new MetricAccumulator(quantiles);
  const byLead = Array.from({ length: horizon }, () => new MetricAccumulator(quantiles));
  const byForecast: MetricSet[] = [];
  const bandAt = new Float64Array(quantiles.length);
  for (const f of forecasts) {
    const one = new MetricAccumulator(quantiles);
    for (let h = 0; h < horizon; h++) {
      let bands: Float64Array | undefined;
      if (f.bands && f.bands.length === quantiles.length) {
        for (let i = 0; i < quantiles.length; i++) bandAt[i] = f.bands[i][h];
        bands = bandAt;
      }
      const a = f.actual[h];
      const p = f.forecast[h];
      overall.add(a, p, f.scale, bands);
      byLead[h].add(a, p, f.scale, bands);
      one.add(a, p, f.scale, bands);
    }
    byForecast.push(one.result());
  }
  return { season, horizon, overall: overall.result(), byLead: byLead.map((a) => a.result()), byForecast };
}
