/**
 * The dense products of the fit, on the SIMD kernels when available, else plain loops:
 * Gram and cross products over row ranges, and residuals Y - A W.
 */
import { simdKernels } from './distance.ts';

/** Gram matrix G = A^T A over rows [r0, r1) of a row-major n x p matrix (full symmetric result). */
export function gram(a: Float64Array, p: number, r0: number, r1: number, out: Float64Array = new Float64Array(p * p)): Float64Array {
  out.fill(0);
  for (let n = r0; n < r1; n++) {
    const o = n * p;
    for (let i = 0; i < p; i++) {
      const v = a[o + i];
      if (v === 0) continue;
      const gi = i * p;
      for (let j = i; j < p; j++) out[gi + j] += v * a[o + j];
    }
  }
  for (let i = 0; i < p; i++) for (let j = i + 1; j < p; j++) out[j * p + i] = out[i * p + j];
  return out;
}

/** C = A^T B over rows [r0, r1): A is n x p, B is n x h (row-major); C is p x h. */
export function crossProduct(a: Float64Array, p: number, b: Float64Array, h: number, r0: number, r1: number, out: Float64Array = new Float64Array(p * h)): Float64Array {
  out.fill(0);
  for (let n = r0; n < r1; n++) {
    const ao = n * p;
    const bo = n * h;
    for (let i = 0; i < p; i++) {
      const v = a[ao + i];
      if (v === 0) continue;
      const co = i * h;
      for (let c = 0; c < h; c++) out[co + c] += v * b[bo + c];
    }
  }
  return out;
}

/** R = Y - A W over rows [r0, r1) (residual rows indexed from 0). */
function residualScalar(a: Float64Array, p: number, w: Float64Array, y: Float64Array, h: number, r0: number, r1: number, out: Float64Array): Float64Array {
  for (let n = r0; n < r1; n++) {
    const ao = n * p;
    const ro = (n - r0) * h;
    for (let c = 0; c < h; c++) out[ro + c] = y[n * h + c];
    for (let i = 0; i < p; i++) {
      const v = a[ao + i];
      if (v === 0) continue;
      const wo = i * h;
      for (let c = 0; c < h; c++) out[ro + c] -= v * w[wo + c];
    }
  }
  return out;
}

/** G = A^T A and B = A^T R over rows [r0, r1) (A is n x p, R is n x h). */
export function gramCross(a: Float64Array, p: number, r: Float64Array, h: number, r0: number, r1: number): { g: Float64Array; b: Float64Array } {
  const k = simdKernels();
  if (!k) return { g: gram(a, p, r0, r1), b: crossProduct(a, p, r, h, r0, r1) };
  const out = k.crossRows(a, p, r, h, r0, r1, true, new Float64Array(p * (p + h)));
  const g = new Float64Array(p * p);
  const b = new Float64Array(p * h);
  for (let i = 0; i < p; i++) {
    g.set(out.subarray(i * (p + h), i * (p + h) + p), i * p);
    b.set(out.subarray(i * (p + h) + p, (i + 1) * (p + h)), i * h);
  }
  return { g, b };
}

/** A^T [A | R] over rows [r0, r1) as one p x (p + h) matrix (A is n x p, R is n x h). */
export function crossWithSelf(a: Float64Array, p: number, r: Float64Array, h: number, r0: number, r1: number): Float64Array {
  const k = simdKernels();
  if (k) return k.crossRows(a, p, r, h, r0, r1, true, new Float64Array(p * (p + h)));
  const g = gram(a, p, r0, r1);
  const b = crossProduct(a, p, r, h, r0, r1);
  const out = new Float64Array(p * (p + h));
  for (let i = 0; i < p; i++) {
    out.set(g.subarray(i * p, (i + 1) * p), i * (p + h));
    out.set(b.subarray(i * h, (i + 1) * h), i * (p + h) + p);
  }
  return out;
}

/** B = A^T R over rows [r0, r1) (R rows indexed like A's). */
export function crossRows(a: Float64Array, p: number, r: Float64Array, h: number, r0: number, r1: number): Float64Array {
  const k = simdKernels();
  if (!k) return crossProduct(a, p, r, h, r0, r1);
  return k.crossRows(a, p, r, h, r0, r1, false, new Float64Array(p * h));
}

/** out = Y - A W over rows [r0, r1) (out rows indexed from 0; A n x p, W p x h, Y n x h). */
export function residualRows(a: Float64Array, p: number, w: Float64Array, y: Float64Array, h: number, r0: number, r1: number, out: Float64Array = new Float64Array((r1 - r0) * h)): Float64Array {
  const m = r1 - r0;
  const k = simdKernels();
  if (k) {
    k.gemm(a.subarray(r0 * p, r1 * p), m, p, w, h, out);
    for (let i = 0; i < m * h; i++) out[i] = y[r0 * h + i] - out[i];
    return out;
  }
  return residualScalar(a, p, w, y, h, r0, r1, out);
}

/** out (m x n) = A (m x k) B (k x n), row-major. */
export function matmul(a: Float64Array, m: number, k: number, b: Float64Array, n: number, out: Float64Array = new Float64Array(m * n)): Float64Array {
  const s = simdKernels();
  if (s) return s.gemm(a, m, k, b, n, out);
  out.fill(0, 0, m * n);
  for (let i = 0; i < m; i++) {
    for (let l = 0; l < k; l++) {
      const v = a[i * k + l];
      if (v === 0) continue;
      const bo = l * n;
      const oo = i * n;
      for (let j = 0; j < n; j++) out[oo + j] += v * b[bo + j];
    }
  }
  return out;
}
