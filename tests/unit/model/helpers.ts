/** Small builders shared by the model tests. */
import type { Dense } from '../../../src/model/types.ts';
import { mulberry32 } from '../../../src/model/random.ts';

export function dense(rows: number[][]): Dense {
  const r = rows.length;
  const c = rows[0].length;
  const data = new Float64Array(r * c);
  rows.forEach((row, i) => row.forEach((v, j) => (data[i * c + j] = v)));
  return { data, rows: r, cols: c };
}

/** Gaussian-ish noise from the seeded source (sum of uniforms, mean 0, variance 1). */
export function noise(seed: number): () => number {
  const rnd = mulberry32(seed);
  return () => {
    let s = 0;
    for (let i = 0; i < 12; i++) s += rnd();
    return s - 6;
  };
}

/**
 * Lag-feature training set of a series: row o has inputs values[o-1..o-nLags] (most recent first)
 * and targets values[o+0..o+horizon-1].
 */
export function lagSamples(values: number[], nLags: number, horizon: number, from = nLags, to = values.length - horizon + 1): { x: Dense; y: Dense } {
  const n = to - from;
  const x = new Float64Array(n * nLags);
  const y = new Float64Array(n * horizon);
  for (let i = 0; i < n; i++) {
    const o = from + i;
    for (let l = 0; l < nLags; l++) x[i * nLags + l] = values[o - 1 - l];
    for (let h = 0; h < horizon; h++) y[i * horizon + h] = values[o + h];
  }
  return { x: { data: x, rows: n, cols: nLags }, y: { data: y, rows: n, cols: horizon } };
}

export function sliceRows(m: Dense, r0: number, r1: number): Dense {
  return { data: m.data.slice(r0 * m.cols, r1 * m.cols), rows: r1 - r0, cols: m.cols };
}

export function mse(a: Float64Array, b: Float64Array): number {
  let s = 0;
  for (let i = 0; i < a.length; i++) s += (a[i] - b[i]) ** 2;
  return s / a.length;
}
