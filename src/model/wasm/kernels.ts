/**
 * Loader of the SIMD kernels (built by build.ts): C = A B and squared distances, over float64
 * inputs copied into the module's memory. Returns null where WebAssembly SIMD is not available,
 * so the callers fall back to the scalar TypeScript loops (same formulas, other summation order).
 */
import { KERNELS_WASM_BASE64 } from './kernels.wasm.ts';

/** Rows kept in the module's memory across calls (one k-means run): distances and assignment. */
export interface ResidentRows {
  /** out (m x n) = squared distances of the rows to the n centres. */
  dist2(c: Float64Array, c2: Float64Array, n: number, out: Float64Array): Float64Array;
  /** Nearest centre of every row into labels, its squared distance into mind; returns the sum. */
  assign(c: Float64Array, c2: Float64Array, n: number, labels: Int32Array, mind: Float64Array): number;
}

export interface SimdKernels {
  /** Uploads x (m x k) and its row norms once for repeated distance passes. */
  resident(x: Float64Array, x2: Float64Array, m: number, k: number): ResidentRows;
  /** out (m x n) = A (m x k) B (k x n), all row-major. */
  gemm(a: Float64Array, m: number, k: number, b: Float64Array, n: number, out: Float64Array): Float64Array;
  /**
   * Products with the rows [r0, r1) of a (n x p): out = A^T [A | R] (p x (p + h)) when withGram,
   * else A^T R (p x h); R is n x h. Summed over chunks of rows that stay in cache.
   */
  crossRows(a: Float64Array, p: number, r: Float64Array, h: number, r0: number, r1: number, withGram: boolean, out: Float64Array): Float64Array;
  /** out[i*n + j] = max(0, a2[i] + c2[j] - 2 Σ_l a[i*k + l] c[j*k + l]) (a is m x k, c is n x k). */
  dist2(a: Float64Array, a2: Float64Array, m: number, c: Float64Array, c2: Float64Array, n: number, k: number, out: Float64Array): Float64Array;
}

interface Exports {
  memory: WebAssembly.Memory;
  gemm(a: number, m: number, k: number, b: number, n: number, c: number): void;
  gemmAdd(a: number, m: number, k: number, b: number, n: number, c: number): void;
  dist2(a: number, m: number, k: number, b: number, n: number, a2: number, b2: number, c: number): void;
  argmin(d: number, m: number, n: number, stride: number, labels: number, mind: number): number;
}

const PAGE = 65536;
/** Rows per chunk in crossRows: A chunk and [A | R] chunk together stay well inside L2. */
const CHUNK_ROWS = 128;

function align16(v: number): number {
  return (v + 15) & ~15;
}

export function loadSimdKernels(): SimdKernels | null {
  let ex: Exports;
  try {
    const bytes = Buffer.from(KERNELS_WASM_BASE64, 'base64');
    if (!WebAssembly.validate(bytes)) return null;
    ex = new WebAssembly.Instance(new WebAssembly.Module(bytes), {}).exports as unknown as Exports;
  } catch {
    return null;
  }
  const mem = ex.memory;
  let f64 = new Float64Array(mem.buffer);
  /** Makes the memory at least `bytes` long (views are re-made after a grow). */
  const reserve = (bytes: number): void => {
    if (bytes > mem.buffer.byteLength) {
      mem.grow(Math.ceil((bytes - mem.buffer.byteLength) / PAGE));
      f64 = new Float64Array(mem.buffer);
    }
  };
  /** Copies the m x np result (np = n rounded up to even) out, dropping the pad column. */
  const copyOut = (pc: number, m: number, n: number, np: number, out: Float64Array): void => {
    const o = pc / 8;
    if (np === n) {
      out.set(f64.subarray(o, o + m * n));
      return;
    }
    if (n < 16) {
      for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) out[i * n + j] = f64[o + i * np + j];
      return;
    }
    for (let i = 0; i < m; i++) out.set(f64.subarray(o + i * np, o + i * np + n), i * n);
  };
  /** Owner of the memory contents: a ResidentRows token, or null after any other call. */
  let owner: object | null = null;
  /** Writes centres transposed (k x np, zero pad column) at byte offset pb, norms at pb2. */
  const putCentres = (c: Float64Array, c2: Float64Array, n: number, np: number, k: number, pb: number, pb2: number): void => {
    const ob = pb / 8;
    for (let j = 0; j < n; j++) for (let l = 0; l < k; l++) f64[ob + l * np + j] = c[j * k + l];
    if (np !== n) for (let l = 0; l < k; l++) f64[ob + l * np + n] = 0;
    f64.set(c2.subarray(0, n), pb2 / 8);
    // A pad centre must never win the argmin: give it an infinite norm.
    if (np !== n) f64[pb2 / 8 + n] = Infinity;
  };
  return {
    resident(x, x2, m, k) {
      const token = {};
      const px = 0;
      const px2 = align16(px + m * k * 8);
      const base = align16(px2 + m * 8);
      const upload = (): void => {
        reserve(base);
        f64.set(x.subarray(0, m * k), px / 8);
        f64.set(x2.subarray(0, m), px2 / 8);
        owner = token;
      };
      const pass = (c: Float64Array, c2: Float64Array, n: number): { np: number; pd: number } => {
        const np = n + (n & 1);
        const pb = base;
        const pb2 = align16(pb + k * np * 8);
        const pd = align16(pb2 + np * 8);
        const pl = align16(pd + m * np * 8);
        const pm = align16(pl + m * 4);
        reserve(pm + m * 8);
        if (owner !== token) upload();
        putCentres(c, c2, n, np, k, pb, pb2);
        ex.dist2(px, m, k, pb, np, px2, pb2, pd);
        return { np, pd };
      };
      return {
        dist2(c, c2, n, out) {
          const { np, pd } = pass(c, c2, n);
          copyOut(pd, m, n, np, out);
          return out;
        },
        assign(c, c2, n, labels, mind) {
          const { np, pd } = pass(c, c2, n);
          const pl = align16(pd + m * np * 8);
          const pm = align16(pl + m * 4);
          const sum = ex.argmin(pd, m, n, np, pl, pm);
          labels.set(new Int32Array(mem.buffer, pl, m));
          mind.set(f64.subarray(pm / 8, pm / 8 + m));
          return sum;
        },
      };
    },
    gemm(a, m, k, b, n, out) {
      owner = null;
      const np = n + (n & 1);
      const pa = 0;
      const pb = align16(pa + m * k * 8);
      const pc = align16(pb + k * np * 8);
      reserve(pc + m * np * 8);
      f64.set(a.subarray(0, m * k), pa / 8);
      if (np === n) f64.set(b.subarray(0, k * n), pb / 8);
      else {
        const o = pb / 8;
        for (let l = 0; l < k; l++) {
          f64.set(b.subarray(l * n, (l + 1) * n), o + l * np);
          f64[o + l * np + n] = 0;
        }
      }
      ex.gemm(pa, m, k, pb, np, pc);
      copyOut(pc, m, n, np, out);
      return out;
    },
    crossRows(a, p, r, h, r0, r1, withGram, out) {
      owner = null;
      const nc = (withGram ? p : 0) + h;
      const ncp = nc + (nc & 1);
      const pc = 0;
      const pa = align16(pc + p * ncp * 8);
      const pb = align16(pa + p * CHUNK_ROWS * 8);
      reserve(pb + CHUNK_ROWS * ncp * 8);
      const oc = pc / 8, oa = pa / 8, ob = pb / 8;
      f64.fill(0, oc, oc + p * ncp);
      for (let s = r0; s < r1; s += CHUNK_ROWS) {
        const cr = Math.min(CHUNK_ROWS, r1 - s);
        // A chunk transposed (p x cr) and [A | R] chunk (cr x ncp).
        for (let i = 0; i < cr; i++) {
          const src = (s + i) * p;
          const dst = ob + i * ncp;
          for (let j = 0; j < p; j++) f64[oa + j * cr + i] = a[src + j];
          let c = 0;
          if (withGram) {
            f64.set(a.subarray(src, src + p), dst);
            c = p;
          }
          f64.set(r.subarray((s + i) * h, (s + i + 1) * h), dst + c);
          if (ncp !== nc) f64[dst + nc] = 0;
        }
        ex.gemmAdd(pa, p, cr, pb, ncp, pc);
      }
      copyOut(pc, p, nc, ncp, out);
      return out;
    },
    dist2(a, a2, m, c, c2, n, k, out) {
      owner = null;
      const np = n + (n & 1);
      const pa = 0;
      const pb = align16(pa + m * k * 8);
      const pa2 = align16(pb + k * np * 8);
      const pb2 = align16(pa2 + m * 8);
      const pc = align16(pb2 + np * 8);
      reserve(pc + m * np * 8);
      f64.set(a.subarray(0, m * k), pa / 8);
      // Centres transposed (k x np) so the kernel reads them along the centre axis.
      putCentres(c, c2, n, np, k, pb, pb2);
      f64.set(a2.subarray(0, m), pa2 / 8);
      ex.dist2(pa, m, k, pb, np, pa2, pb2, pc);
      copyOut(pc, m, n, np, out);
      return out;
    },
  };
}
