/**
 * Loader of the SIMD kernels (built by build.ts): C = A B and squared distances, over float64
 * inputs copied into the module's memory. Returns null where WebAssembly SIMD is not available,
 * so the callers fall back to the scalar TypeScript loops (same formulas, other summation order).
 */
import { KERNELS_WASM_BASE64 } from './kernels.wasm.ts';

/** State of one Lloyd run (per row and per centre), where the assignment passes keep it. */
export interface LloydState {
  labels: Int32Array;
  /** Squared distance to the own centre (exact for every row only after exactOwn). */
  own: Float64Array;
  /** Upper bound on the distance to the own centre, lower bound on the distance to the second nearest. */
  upper: Float64Array;
  lower: Float64Array;
  /** Member sums (n x k) and counts per centre. */
  sums: Float64Array;
  counts: Int32Array;
}

/**
 * Assignment passes of one Lloyd run (see kmeans.ts for the bounds). pass() mode 0: every row,
 * from no labels; 1: pruned by the bounds; 2: bounds updated, every row assigned (plain Lloyd).
 * It returns the number of changed labels and keeps sums and counts current.
 */
export interface LloydWork {
  /** The state arrays; views into module memory may move, so fetch them again after any call. */
  views(): LloydState;
  /** No labels, zero sums and counts. */
  reset(): void;
  pass(c: Float64Array, c2: Float64Array, moved: Float64Array, mode: 0 | 1 | 2, m1: number, m2: number, mk: number, slack0: number, slackUnit: number): number;
  /** own = exact squared distance of every row to its centre, upper = its square root. */
  exactOwn(c: Float64Array): void;
}

/** Rows kept in the module's memory across calls (one k-means run): distances and assignment. */
export interface ResidentRows {
  /** Mean over the columns of each column's variance (population), as the scalar column loops compute it. */
  meanVariance(): number;
  /** The state and passes of a Lloyd run with n centres (one at a time per resident). */
  lloydWork(n: number): LloydWork;
  /** out (m x n) = squared distances of the rows to the n centres. */
  dist2(c: Float64Array, c2: Float64Array, n: number, out: Float64Array): Float64Array;
  /**
   * k-means++ step for one new centre c: minD2[i] = min(minD2[i], |x_i - c|^2) (difference form;
   * = when first). Returns the sum and a view of minD2, valid until the next kernel call.
   */
  seedUpdate(c: Float64Array, first: boolean): { total: number; minD2: Float64Array };
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
  /**
   * Cholesky factor of the symmetric p x p matrix a (row-major, only its lower triangle is read)
   * into out (lower triangle, zeros above). Returns false when a pivot is not positive.
   */
  cholesky(a: Float64Array, p: number, out: Float64Array): boolean;
  /** out (p x h) = (L L^T)^-1 b for a factor L from cholesky (same operation order as the scalar loops). */
  cholSolve(lower: Float64Array, p: number, b: Float64Array, h: number, out: Float64Array): Float64Array;
  /**
   * Gaussian activations out[i, j] = exp(-g[j] d[i, j]) for m rows of k squared distances
   * (row-major). Within about 1 ulp of Math.exp (degree-13 polynomial after reduction by ln 2).
   */
  expNeg(g: Float64Array, d: Float64Array, m: number, k: number, out: Float64Array): Float64Array;
}

interface Exports {
  memory: WebAssembly.Memory;
  gemm(a: number, m: number, k: number, b: number, n: number, c: number): void;
  gemmAdd(a: number, m: number, k: number, b: number, n: number, c: number): void;
  gemmAddUpper(a: number, m: number, k: number, b: number, n: number, c: number): void;
  dist2(a: number, m: number, k: number, b: number, n: number, a2: number, b2: number, c: number): void;
  transpose(src: number, rows: number, cols: number, stride: number, dst: number): void;
  ownDist(x: number, m: number, k: number, c: number, labels: number, out: number): void;
  seedUpdate(x: number, m: number, k: number, c: number, mind: number, first: number): number;
  cholesky(a: number, p: number): number;
  centreGaps(c: number, n: number, k: number, half: number): void;
  padRows(p: number, n: number, w: number, we: number): void;
  meanVariance(x: number, m: number, k: number, acc: number): number;
  lloydPass(x: number, x2: number, m: number, k: number, ct: number, c2: number, np: number, c: number,
    labels: number, upper: number, lower: number, own: number, todo: number, sums: number, counts: number, half: number, moved: number,
    mode: number, m1: number, m2: number, mk: number, slack0: number, slackUnit: number, dbuf: number, lab: number, best: number, second: number): number;
  cholSolve(l: number, p: number, b: number, h: number): void;
  expNeg(g: number, d: number, m: number, k: number, out: number): void;
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
      const stateAt = align16(px2 + m * 8);
      /** Start of the scratch space of the calls below (after a Lloyd run's state, when one exists). */
      let base = stateAt;
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
        reserve(pd + m * np * 8);
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
        seedUpdate(c, first) {
          const pm = base;
          const pc = align16(pm + m * 8);
          reserve(pc + k * 8);
          if (owner !== token) {
            if (!first) throw new Error('seedUpdate: rows were evicted between seeding steps');
            upload();
          }
          f64.set(c.subarray(0, k), pc / 8);
          const total = ex.seedUpdate(px, m, k, pc, pm, first ? 1 : 0);
          return { total, minD2: f64.subarray(pm / 8, pm / 8 + m) };
        },
        meanVariance() {
          reserve(base + 2 * k * 8);
          if (owner !== token) upload();
          return ex.meanVariance(px, m, k, base);
        },
        lloydWork(n) {
          const np = n + (n & 1);
          // State: labels, upper, lower, own, todo (per row); sums, counts, half, moved, centres
          // (row-major, then transposed with norms for the kernel); chunk scratch of 32 rows.
          let o = stateAt;
          const take = (bytes: number): number => {
            const at = o;
            o = align16(o + bytes);
            return at;
          };
          const pLab = take(m * 4), pUp = take(m * 8), pLo = take(m * 8), pOwn = take(m * 8), pTodo = take(m * 4);
          const pSums = take(n * k * 8), pCnt = take(n * 4), pHalf = take(n * 8), pMoved = take(n * 8), pC = take(n * k * 8);
          const pCt = take(k * np * 8), pC2 = take(np * 8), pD = take(32 * np * 8), pL = take(32 * 4), pB = take(32 * 8), pS = take(32 * 8);
          base = o;
          reserve(base);
          if (owner !== token) upload();
          let buf: ArrayBuffer | null = null;
          let state: LloydState | null = null;
          const views = (): LloydState => {
            if (state === null || buf !== mem.buffer) {
              buf = mem.buffer;
              state = {
                labels: new Int32Array(buf, pLab, m),
                own: new Float64Array(buf, pOwn, m),
                upper: new Float64Array(buf, pUp, m),
                lower: new Float64Array(buf, pLo, m),
                sums: new Float64Array(buf, pSums, n * k),
                counts: new Int32Array(buf, pCnt, n),
              };
            }
            return state;
          };
          const mine = (): void => {
            if (owner !== token) throw new Error('lloydWork: the rows were evicted during a Lloyd run');
          };
          return {
            views,
            reset() {
              if (owner !== token) upload();
              const v = views();
              v.labels.fill(-1);
              v.sums.fill(0);
              v.counts.fill(0);
            },
            pass(c, c2, moved, mode, m1, m2, mk, slack0, slackUnit) {
              mine();
              f64.set(c.subarray(0, n * k), pC / 8);
              putCentres(c, c2, n, np, k, pCt, pC2);
              f64.set(moved.subarray(0, n), pMoved / 8);
              if (mode === 1) ex.centreGaps(pC, n, k, pHalf);
              return ex.lloydPass(px, px2, m, k, pCt, pC2, np, pC, pLab, pUp, pLo, pOwn, pTodo, pSums, pCnt, pHalf, pMoved, mode, m1, m2, mk, slack0, slackUnit, pD, pL, pB, pS);
            },
            exactOwn(c) {
              mine();
              f64.set(c.subarray(0, n * k), pC / 8);
              ex.ownDist(px, m, k, pC, pLab, pOwn);
              const v = views();
              for (let i = 0; i < m; i++) v.upper[i] = Math.sqrt(v.own[i]);
            },
          };
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
      // Rows [r0, r1) of A and R copied once (rows padded to an even width), then per chunk of
      // rows: At = chunk^T in the module, C1 += At A_chunk, C2 += At R_chunk.
      const n = r1 - r0;
      const pe = p + (p & 1);
      const he = h + (h & 1);
      const p1 = 0;
      const p2 = align16(p1 + (withGram ? pe * pe * 8 : 0));
      const pA = align16(p2 + pe * he * 8);
      const pR = align16(pA + n * pe * 8);
      const pT = align16(pR + n * he * 8);
      reserve(pT + pe * CHUNK_ROWS * 8);
      const putRows = (src: Float64Array, w: number, we: number, at: number): void => {
        const o = at / 8;
        // One copy of the block, then (odd widths) the rows spread to the even stride in the module.
        f64.set(src.subarray(r0 * w, r1 * w), o);
        if (we !== w) ex.padRows(at, n, w, we);
      };
      putRows(a, p, pe, pA);
      putRows(r, h, he, pR);
      if (withGram) f64.fill(0, p1 / 8, p1 / 8 + pe * pe);
      f64.fill(0, p2 / 8, p2 / 8 + pe * he);
      for (let s = 0; s < n; s += CHUNK_ROWS) {
        const cr = Math.min(CHUNK_ROWS, n - s);
        ex.transpose(pA + s * pe * 8, cr, pe, pe, pT);
        if (withGram) ex.gemmAddUpper(pT, pe, cr, pA + s * pe * 8, pe, p1);
        ex.gemmAdd(pT, pe, cr, pR + s * he * 8, he, p2);
      }
      const nc = (withGram ? p : 0) + h;
      for (let i = 0; i < p; i++) {
        // Gram: the upper part was summed (from the even column at or left of the diagonal); mirror it.
        if (withGram) for (let j = 0; j < p; j++) out[i * nc + j] = j >= i ? f64[p1 / 8 + i * pe + j] : f64[p1 / 8 + j * pe + i];
        const o = withGram ? p : 0;
        for (let c = 0; c < h; c++) out[i * nc + o + c] = f64[p2 / 8 + i * he + c];
      }
      return out;
    },
    cholesky(a, p, out) {
      owner = null;
      reserve(p * p * 8);
      f64.set(a.subarray(0, p * p), 0);
      const bad = ex.cholesky(0, p);
      if (bad !== 0) return false;
      out.set(f64.subarray(0, p * p));
      for (let i = 0; i < p; i++) out.fill(0, i * p + i + 1, (i + 1) * p);
      return true;
    },
    expNeg(g, d, m, k, out) {
      owner = null;
      const ke = k + (k & 1);
      const pg = 0;
      const pd = align16(pg + ke * 8);
      const po = align16(pd + m * ke * 8);
      reserve(po + m * ke * 8);
      f64.set(g.subarray(0, k), pg / 8);
      const od = pd / 8;
      const oo = po / 8;
      if (ke === k) {
        f64.set(d.subarray(0, m * k), od);
        ex.expNeg(pg, pd, m, ke, po);
        out.set(f64.subarray(oo, oo + m * k));
        return out;
      }
      f64[pg / 8 + k] = 0;
      for (let i = 0; i < m; i++) {
        for (let j = 0; j < k; j++) f64[od + i * ke + j] = d[i * k + j];
        f64[od + i * ke + k] = 0;
      }
      ex.expNeg(pg, pd, m, ke, po);
      for (let i = 0; i < m; i++) for (let j = 0; j < k; j++) out[i * k + j] = f64[oo + i * ke + j];
      return out;
    },
    cholSolve(lower, p, b, h, out) {
      owner = null;
      const he = h + (h & 1);
      const pl = 0;
      const pb = align16(pl + p * p * 8);
      reserve(pb + p * he * 8);
      f64.set(lower.subarray(0, p * p), pl / 8);
      const ob = pb / 8;
      if (he === h) f64.set(b.subarray(0, p * h), ob);
      else {
        for (let i = 0; i < p; i++) {
          f64.set(b.subarray(i * h, (i + 1) * h), ob + i * he);
          f64[ob + i * he + h] = 0;
        }
      }
      ex.cholSolve(pl, p, pb, he);
      if (he === h) out.set(f64.subarray(ob, ob + p * h));
      else for (let i = 0; i < p; i++) out.set(f64.subarray(ob + i * he, ob + i * he + h), i * h);
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
