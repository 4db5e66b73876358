/**
 * Squared Euclidean distances of every sample to every centre, the hot loop of k-means.
 * Form: |x - c|^2 = |x|^2 + |c|^2 - 2 x.c, clipped at 0 (cancellation can give tiny negatives).
 * Runs the WebAssembly SIMD kernel when the runtime has it, else the scalar loops below.
 */
import { loadSimdKernels, type LloydWork, type SimdKernels } from './wasm/kernels.ts';

let simd: SimdKernels | null | undefined;
let wanted: 'auto' | 'js' = 'auto';

/** The SIMD kernels, or null when switched off or unavailable. */
export function simdKernels(): SimdKernels | null {
  if (wanted === 'js') return null;
  if (simd === undefined) simd = loadSimdKernels();
  return simd;
}

/** Chooses the kernels: 'auto' (SIMD when available) or 'js' (scalar loops; for comparisons). */
export function useKernels(kind: 'auto' | 'js'): void {
  wanted = kind;
}

/** Squared distances into out (n x K) with the best available kernel. */
export function dist2Into(x: Float64Array, x2: Float64Array, nRows: number, nFeatures: number, c: Float64Array, c2: Float64Array, nCentres: number, out: Float64Array): void {
  const k = simdKernels();
  if (k) k.dist2(x, x2, nRows, c, c2, nCentres, nFeatures, out);
  else dist2Scalar(x, x2, nRows, nFeatures, c, c2, nCentres, out);
}

/** Row norms |x_n|^2 of a row-major nRows x nCols matrix. */
export function rowNorms2(data: Float64Array, nRows: number, nCols: number, out: Float64Array = new Float64Array(nRows)): Float64Array {
  for (let n = 0; n < nRows; n++) {
    let s = 0;
    const o = n * nCols;
    for (let j = 0; j < nCols; j++) s += data[o + j] * data[o + j];
    out[n] = s;
  }
  return out;
}

/**
 * out[n*K + k] = max(0, x2[n] + c2[k] - 2 x_n . c_k) for n in [0, nRows), k in [0, nCentres).
 * Scalar kernel blocked 2 samples x 4 centres so each loaded x value feeds four multiply-adds.
 */
export function dist2Scalar(
  x: Float64Array,
  x2: Float64Array,
  nRows: number,
  nFeatures: number,
  c: Float64Array,
  c2: Float64Array,
  nCentres: number,
  out: Float64Array,
): void {
  const d = nFeatures;
  const K = nCentres;
  let n = 0;
  for (; n + 1 < nRows; n += 2) {
    const xa = n * d;
    const xb = xa + d;
    let k = 0;
    for (; k + 3 < K; k += 4) {
      const c0 = k * d, c1 = c0 + d, c3 = c1 + d, c4 = c3 + d;
      let a0 = 0, a1 = 0, a2 = 0, a3 = 0, b0 = 0, b1 = 0, b2 = 0, b3 = 0;
      for (let j = 0; j < d; j++) {
        const u = x[xa + j], v = x[xb + j];
        const p = c[c0 + j], q = c[c1 + j], r = c[c3 + j], s = c[c4 + j];
        a0 += u * p; a1 += u * q; a2 += u * r; a3 += u * s;
        b0 += v * p; b1 += v * q; b2 += v * r; b3 += v * s;
      }
      const oa = n * K + k, ob = oa + K;
      const ua = x2[n], ub = x2[n + 1];
      out[oa] = clip0(ua + c2[k] - 2 * a0); out[oa + 1] = clip0(ua + c2[k + 1] - 2 * a1);
      out[oa + 2] = clip0(ua + c2[k + 2] - 2 * a2); out[oa + 3] = clip0(ua + c2[k + 3] - 2 * a3);
      out[ob] = clip0(ub + c2[k] - 2 * b0); out[ob + 1] = clip0(ub + c2[k + 1] - 2 * b1);
      out[ob + 2] = clip0(ub + c2[k + 2] - 2 * b2); out[ob + 3] = clip0(ub + c2[k + 3] - 2 * b3);
    }
    for (; k < K; k++) {
      const co = k * d;
      let a = 0, b = 0;
      for (let j = 0; j < d; j++) {
        a += x[xa + j] * c[co + j];
        b += x[xb + j] * c[co + j];
      }
      out[n * K + k] = clip0(x2[n] + c2[k] - 2 * a);
      out[(n + 1) * K + k] = clip0(x2[n + 1] + c2[k] - 2 * b);
    }
  }
  for (; n < nRows; n++) {
    const xa = n * d;
    for (let k = 0; k < K; k++) {
      const co = k * d;
      let a = 0;
      for (let j = 0; j < d; j++) a += x[xa + j] * c[co + j];
      out[n * K + k] = clip0(x2[n] + c2[k] - 2 * a);
    }
  }
}

function clip0(v: number): number {
  return v > 0 ? v : 0;
}

/** Distances of all rows to all centres (the kernel used by k-means, fit and predict). */
export function dist2All(
  x: Float64Array,
  nRows: number,
  nFeatures: number,
  c: Float64Array,
  nCentres: number,
  out = new Float64Array(nRows * nCentres),
  x2 = rowNorms2(x, nRows, nFeatures),
): Float64Array {
  const c2 = rowNorms2(c, nCentres, nFeatures);
  dist2Into(x, x2, nRows, nFeatures, c, c2, nCentres, out);
  return out;
}

/**
 * One k-means distance pass over rows prepared once (as Lloyd's algorithm keeps them): given the
 * centres, either all squared distances (n x K, into a reused buffer) or a plain Lloyd assignment
 * pass in the module (nearest and second nearest centre of every row, bounds and member sums).
 * Returns a checksum of the result.
 */
export type DistancePassKernel = (c: Float64Array, nCentres: number) => number;

/** The distance passes this process can run, for benches and reports: [name, prepare(rows)]. */
export function distanceKernels(): { active: string; all: [string, (x: Float64Array, nRows: number, nFeatures: number) => DistancePassKernel][] } {
  const all: [string, (x: Float64Array, nRows: number, nFeatures: number) => DistancePassKernel][] = [
    ['js', (x, n, d) => {
      const x2 = rowNorms2(x, n, d);
      let out = new Float64Array(0);
      return (c, k) => {
        if (out.length !== n * k) out = new Float64Array(n * k);
        dist2Scalar(x, x2, n, d, c, rowNorms2(c, k, d), k, out);
        return out[n * k - 1];
      };
    }],
  ];
  const s = simdKernels();
  if (s) {
    all.push(['wasm', (x, n, d) => {
      const res = s.resident(x, rowNorms2(x, n, d), n, d);
      let out = new Float64Array(0);
      return (c, k) => {
        if (out.length !== n * k) out = new Float64Array(n * k);
        res.dist2(c, rowNorms2(c, k, d), k, out);
        return out[n * k - 1];
      };
    }]);
    all.push(['wasm-asg', (x, n, d) => {
      // A plain Lloyd assignment pass (every row; the first call per K sets the labels up).
      const res = s.resident(x, rowNorms2(x, n, d), n, d);
      let work: LloydWork | null = null;
      let kWork = -1;
      let moved = new Float64Array(0);
      return (c, k) => {
        const c2 = rowNorms2(c, k, d);
        if (work === null || kWork !== k) {
          work = res.lloydWork(k);
          work.reset();
          moved = new Float64Array(k);
          work.pass(c, c2, moved, 0, 0, 0, -1, 0, 0);
          kWork = k;
        }
        work.pass(c, c2, moved, 2, 0, 0, -1, 0, 0);
        return work.views().lower[n - 1];
      };
    }]);
  }
  return { active: s ? 'wasm-simd' : 'js-scalar', all };
}
