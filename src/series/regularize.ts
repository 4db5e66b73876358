/**
 * Raw readings -> a fixed grid. Readings may come in any order, with duplicates, with
 * non-numeric or non-finite values, and with gaps. See RegularizeOptions for the knobs.
 */
import { SeriesError } from './errors.ts';
import type { Reading, RegularizeOptions, RegularSeries } from './types.ts';

function checkOptions(opts: RegularizeOptions): void {
  const series = opts.series ?? '(unnamed)';
  const bad = (field: string, message: string, hint: string): never => {
    throw new SeriesError({ code: 'BAD_OPTIONS', series, field, message, hint });
  };
  if (!Number.isInteger(opts.stepMs) || opts.stepMs <= 0) bad('stepMs', `stepMs=${opts.stepMs} is not a positive integer`, 'use e.g. 3600000 for hourly data');
  if (!Number.isFinite(opts.startMs) || !Number.isFinite(opts.endMs)) bad('startMs', 'startMs and endMs must be finite epoch milliseconds', 'pass the window bounds as numbers');
  if (opts.endMs < opts.startMs) bad('endMs', `endMs (${opts.endMs}) is before startMs (${opts.startMs})`, 'swap the bounds');
  if (!Number.isInteger(opts.maxFillSteps) || opts.maxFillSteps < 0) bad('maxFillSteps', `maxFillSteps=${opts.maxFillSteps} is not a non-negative integer`, 'use 0 to disable gap filling');
  if (!['mean', 'sum', 'last', 'max', 'min'].includes(opts.aggregation)) bad('aggregation', `unknown aggregation "${String(opts.aggregation)}"`, 'use mean, sum, last, max or min');
  if (!['last', 'mean'].includes(opts.duplicates)) bad('duplicates', `unknown duplicate policy "${String(opts.duplicates)}"`, 'use last or mean');
}

/**
 * Put readings on the grid startMs + i * stepMs, i = 0 .. ceil((endMs - startMs) / stepMs) - 1.
 *
 * 1. Readings whose t or v is not a finite number (typeof !== 'number', NaN, ±Infinity) are
 *    dropped and counted in stats.dropped; readings outside [startMs, endMs) are counted in
 *    stats.outOfRange and ignored.
 * 2. Readings with the same timestamp are merged first: 'last' keeps the one that came last in
 *    input order, 'mean' averages them (stats.duplicates counts the readings merged away).
 * 3. The merged points of each bucket are aggregated (mean / sum / last-in-time / max / min).
 * 4. Interior gaps of at most maxFillSteps empty buckets are filled by linear interpolation
 *    between the neighbouring buckets (stats.filled, and `filled[i] = 1`); longer gaps and
 *    gaps at either end stay NaN (stats.missingSteps).
 */
export function regularize(readings: readonly Reading[], opts: RegularizeOptions): RegularSeries {
  checkOptions(opts);
  const { stepMs, startMs, endMs } = opts;
  const nSteps = Math.max(0, Math.ceil((endMs - startMs) / stepMs));

  // 1. valid readings in range
  const nIn = readings.length;
  const ts = new Float64Array(nIn);
  const vs = new Float64Array(nIn);
  let m = 0;
  let dropped = 0;
  let outOfRange = 0;
  let sorted = true;
  for (let i = 0; i < nIn; i++) {
    const r = readings[i] as unknown as { t?: unknown; v?: unknown } | null | undefined;
    const t = r == null ? undefined : r.t;
    const v = r == null ? undefined : r.v;
    if (typeof t !== 'number' || !Number.isFinite(t) || typeof v !== 'number' || !Number.isFinite(v)) {
      dropped++;
      continue;
    }
    if (t < startMs || t >= endMs) {
      outOfRange++;
      continue;
    }
    if (m > 0 && t < ts[m - 1]) sorted = false;
    ts[m] = t;
    vs[m] = v;
    m++;
  }

  // 2. stable time order (input order breaks ties, so 'last' means last in input order)
  let order: Uint32Array | null = null;
  if (!sorted) {
    const idx = new Array<number>(m);
    for (let i = 0; i < m; i++) idx[i] = i;
    idx.sort((a, b) => ts[a] - ts[b] || a - b);
    order = Uint32Array.from(idx);
  }

  // 3. merge duplicates, then aggregate per bucket
  const acc = new Float64Array(nSteps);
  const cnt = new Uint32Array(nSteps);
  const agg = opts.aggregation;
  let duplicates = 0;
  let k = 0;
  while (k < m) {
    const first = order ? order[k] : k;
    const t = ts[first];
    let value = vs[first];
    let sum = value;
    let n = 1;
    let j = k + 1;
    while (j < m) {
      const q = order ? order[j] : j;
      if (ts[q] !== t) break;
      value = vs[q];
      sum += value;
      n++;
      j++;
    }
    if (n > 1) {
      duplicates += n - 1;
      if (opts.duplicates === 'mean') value = sum / n;
    }
    k = j;
    const b = Math.floor((t - startMs) / stepMs);
    if (cnt[b] === 0) {
      acc[b] = value;
    } else if (agg === 'mean' || agg === 'sum') {
      acc[b] += value;
    } else if (agg === 'last') {
      acc[b] = value; // time order: the latest point of the bucket wins
    } else if (agg === 'max') {
      if (value > acc[b]) acc[b] = value;
    } else if (value < acc[b]) {
      acc[b] = value;
    }
    cnt[b]++;
  }

  const values = new Float64Array(nSteps);
  for (let i = 0; i < nSteps; i++) {
    values[i] = cnt[i] === 0 ? NaN : agg === 'mean' ? acc[i] / cnt[i] : acc[i];
  }

  // 4. fill short interior gaps: v = a + (b - a) * (i - i0) / (i1 - i0)
  const filledMask = new Uint8Array(nSteps);
  let filled = 0;
  let i = 0;
  while (i < nSteps) {
    if (!Number.isNaN(values[i])) {
      i++;
      continue;
    }
    let e = i;
    while (e < nSteps && Number.isNaN(values[e])) e++;
    const len = e - i;
    if (i > 0 && e < nSteps && len <= opts.maxFillSteps) {
      const a = values[i - 1];
      const b = values[e];
      const span = len + 1;
      for (let p = i; p < e; p++) {
        values[p] = a + ((b - a) * (p - i + 1)) / span;
        filledMask[p] = 1;
      }
      filled += len;
    }
    i = e;
  }
  let missingSteps = 0;
  for (let p = 0; p < nSteps; p++) if (Number.isNaN(values[p])) missingSteps++;

  return {
    startMs,
    stepMs,
    values,
    filled: filledMask,
    stats: { readingsIn: nIn, dropped, outOfRange, duplicates, filled, missingSteps },
  };
}

/** Index of the last step with a value (observed or filled) at or before `atIndex`; -1 if none. */
export function lastValueIndex(series: RegularSeries, atIndex = series.values.length - 1): number {
  for (let i = Math.min(atIndex, series.values.length - 1); i >= 0; i--) {
    if (!Number.isNaN(series.values[i])) return i;
  }
  return -1;
}

/** Grid index of the bucket containing instant tMs (may be out of range). */
export function indexAt(series: Pick<RegularSeries, 'startMs' | 'stepMs'>, tMs: number): number {
  return Math.floor((tMs - series.startMs) / series.stepMs);
}
