/**
 * Baselines scored on the same origins as the RBF model, so nobody has to take it on faith:
 *  - seasonal naive with a daily and (where the step allows) a weekly season:
 *    forecast(o + h) = y(o + h - m * ceil(h / m)) (Hyndman & Athanasopoulos, "Forecasting:
 *    principles and practice", section on simple methods: the seasonal naive method);
 *  - a plain ridge autoregression on the configured lags, fitted on the same training window,
 *    direct multi-output (one weight column per lead), absolute targets, no calendar features.
 */

export const DAY_MS = 86_400_000;
export const WEEK_MS = 7 * DAY_MS;

export interface SeasonalBaseline {
  /** Stable key used in tables and JSON ("seasonal-naive-daily"). */
  name: string;
  /** Season in steps. */
  m: number;
}

/**
 * The seasonal-naive baselines a step allows: daily when a day is a whole number of steps,
 * weekly when a week is (and differs from the daily one).
 */
export function seasonalBaselines(stepMs: number): SeasonalBaseline[] {
  const out: SeasonalBaseline[] = [];
  if (stepMs > 0 && DAY_MS % stepMs === 0) out.push({ name: 'seasonal-naive-daily', m: DAY_MS / stepMs });
  if (stepMs > 0 && WEEK_MS % stepMs === 0) out.push({ name: 'seasonal-naive-weekly', m: WEEK_MS / stepMs });
  return out;
}

/**
 * Seasonal naive forecast from origin o (values[0..o] known): value of the same phase in the
 * latest complete season; when that value is missing, the one a further season back (up to 4).
 */
export function seasonalNaiveForecast(values: ArrayLike<number>, originIndex: number, horizon: number, m: number): Float64Array {
  const out = new Float64Array(horizon).fill(Number.NaN);
  for (let h = 1; h <= horizon; h++) {
    let src = originIndex + h - m * Math.ceil(h / m);
    for (let tries = 0; tries < 4 && src >= 0; tries++, src -= m) {
      const v = values[src];
      if (Number.isFinite(v)) {
        out[h - 1] = v;
        break;
      }
    }
  }
  return out;
}

export interface RidgeArModel {
  lags: number[];
  horizon: number;
  /** Per-lag mean and scale of the standardised inputs. */
  mean: number[];
  scale: number[];
  /** Intercept per lead (mean target). */
  intercept: number[];
  /** nLags x horizon, row-major. */
  weights: number[];
  /** Training samples used. */
  nSamples: number;
  /** Absolute ridge penalty used. */
  lambda: number;
}

export interface RidgeArOptions {
  /** Relative penalty: lambda = ridge * trace(X^T X) / nLags on standardised lags (default 1e-4). */
  ridge?: number;
}

/**
 * Fits the ridge autoregression on samples whose inputs and targets lie in values[from..origin]:
 * inputs values[o + 1 - lag], targets values[o + 1 .. o + H]; samples with a missing value are
 * skipped. Throws a RangeError when fewer samples than lags remain.
 */
export function fitRidgeAr(values: ArrayLike<number>, fromIndex: number, originIndex: number, lags: readonly number[], horizon: number, opts: RidgeArOptions = {}): RidgeArModel {
  const p = lags.length;
  const maxLag = Math.max(...lags);
  const first = Math.max(0, fromIndex) + maxLag - 1;
  const last = originIndex - horizon;
  const rows: number[] = [];
  for (let o = first; o <= last; o++) {
    let ok = true;
    for (let j = 0; j < p && ok; j++) ok = Number.isFinite(values[o + 1 - lags[j]]);
    for (let h = 1; h <= horizon && ok; h++) ok = Number.isFinite(values[o + h]);
    if (ok) rows.push(o);
  }
  const n = rows.length;
  if (n <= p) throw new RangeError(`ridge baseline needs more than ${p} complete samples in the window, found ${n}`);
  const mean = new Array<number>(p).fill(0);
  const scale = new Array<number>(p).fill(0);
  for (const o of rows) for (let j = 0; j < p; j++) mean[j] += values[o + 1 - lags[j]];
  for (let j = 0; j < p; j++) mean[j] /= n;
  for (const o of rows) for (let j = 0; j < p; j++) scale[j] += (values[o + 1 - lags[j]] - mean[j]) ** 2;
  for (let j = 0; j < p; j++) {
    const s = Math.sqrt(scale[j] / n);
    scale[j] = s > 1e-12 ? s : 1;
  }
  const intercept = new Array<number>(horizon).fill(0);
  for (const o of rows) for (let h = 0; h < horizon; h++) intercept[h] += values[o + 1 + h];
  for (let h = 0; h < horizon; h++) intercept[h] /= n;
  // Normal equations on standardised inputs and centred targets: (X^T X + lambda I) W = X^T Y.
  const xtx = new Float64Array(p * p);
  const xty = new Float64Array(p * horizon);
  const x = new Float64Array(p);
  for (const o of rows) {
    for (let j = 0; j < p; j++) x[j] = (values[o + 1 - lags[j]] - mean[j]) / scale[j];
    for (let i = 0; i < p; i++) {
      const xi = x[i];
      for (let j = 0; j <= i; j++) xtx[i * p + j] += xi * x[j];
      for (let h = 0; h < horizon; h++) xty[i * horizon + h] += xi * (values[o + 1 + h] - intercept[h]);
    }
  }
  let trace = 0;
  for (let i = 0; i < p; i++) {
    for (let j = 0; j < i; j++) xtx[j * p + i] = xtx[i * p + j];
    trace += xtx[i * p + i];
  }
  const lambda = (opts.ridge ?? 1e-4) * (trace / p);
  for (let i = 0; i < p; i++) xtx[i * p + i] += lambda;
  const w = choleskySolve(xtx, xty, p, horizon);
  return { lags: [...lags], horizon, mean, scale, intercept, weights: Array.from(w), nSamples: n, lambda };
}

/** Forecast of the ridge autoregression from origin o; NaN at every lead when an input lag is missing. */
export function forecastRidgeAr(model: RidgeArModel, values: ArrayLike<number>, originIndex: number): Float64Array {
  const p = model.lags.length;
  const H = model.horizon;
  const out = Float64Array.from(model.intercept);
  for (let j = 0; j < p; j++) {
    const v = values[originIndex + 1 - model.lags[j]];
    if (!Number.isFinite(v)) return out.fill(Number.NaN);
    const xj = (v - model.mean[j]) / model.scale[j];
    for (let h = 0; h < H; h++) out[h] += xj * model.weights[j * H + h];
  }
  return out;
}

/** Solves A X = B for symmetric positive definite A (n x n) and B (n x k) by Cholesky, A = L L^T. */
function choleskySolve(a: Float64Array, b: Float64Array, n: number, k: number): Float64Array {
  const l = new Float64Array(n * n);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j <= i; j++) {
      let s = a[i * n + j];
      for (let t = 0; t < j; t++) s -= l[i * n + t] * l[j * n + t];
      if (i === j) {
        if (!(s > 0)) throw new RangeError('ridge baseline: normal matrix is not positive definite');
        l[i * n + i] = Math.sqrt(s);
      } else {
        l[i * n + j] = s / l[j * n + j];
      }
    }
  }
  const x = Float64Array.from(b);
  // Forward substitution L Z = B, then back substitution L^T X = Z, column block at once.
  for (let i = 0; i < n; i++) {
    for (let t = 0; t < i; t++) {
      const lit = l[i * n + t];
      for (let c = 0; c < k; c++) x[i * k + c] -= lit * x[t * k + c];
    }
    const d = l[i * n + i];
    for (let c = 0; c < k; c++) x[i * k + c] /= d;
  }
  for (let i = n - 1; i >= 0; i--) {
    for (let t = i + 1; t < n; t++) {
      const lti = l[t * n + i];
      for (let c = 0; c < k; c++) x[i * k + c] -= lti * x[t * k + c];
    }
    const d = l[i * n + i];
    for (let c = 0; c < k; c++) x[i * k + c] /= d;
  }
  return x;
}
