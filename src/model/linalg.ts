/**
 * Dense linear algebra for the weight solve: symmetric rank-k products, Cholesky with diagonal
 * equilibration, ridge least squares for many right-hand sides with iterative refinement, and a
 * Householder QR least-squares solver used as the accuracy yardstick.
 */
import { crossRows, gramCross, residualRows } from './blas.ts';
import { simdKernels } from './distance.ts';

/** A Cholesky factor of D A D + lambda D^2 (D = diag(scale)), lower triangle row-major. */
export interface CholeskyFactor {
  p: number;
  lower: Float64Array;
  scale: Float64Array;
}

/**
 * Factor (A + diag(lambda)) (lambda a scalar or one value per column) after scaling rows/columns by 1/sqrt(diag): the scaled matrix has a unit
 * diagonal, which removes the part of the condition number that comes from column units.
 * Returns null when a pivot is not positive (singular or indefinite to working precision).
 */
export function choleskyScaled(a: Float64Array, p: number, lambda: number | Float64Array): CholeskyFactor | null {
  const lam = typeof lambda === 'number' ? new Float64Array(p).fill(lambda) : lambda;
  const scale = new Float64Array(p);
  for (let i = 0; i < p; i++) {
    const v = a[i * p + i] + lam[i];
    scale[i] = v > 0 ? 1 / Math.sqrt(v) : 1;
  }
  const l = new Float64Array(p * p);
  const k = simdKernels();
  if (k) {
    // Scaled lower triangle, then the SIMD factor (same recurrence, dot products summed pairwise).
    for (let i = 0; i < p; i++) {
      const si = scale[i];
      for (let j = 0; j < i; j++) l[i * p + j] = a[i * p + j] * si * scale[j];
      l[i * p + i] = (a[i * p + i] + lam[i]) * si * si;
    }
    return k.cholesky(l, p, l) ? { p, lower: l, scale } : null;
  }
  for (let i = 0; i < p; i++) {
    for (let j = 0; j <= i; j++) {
      // l_ij = (s_i s_j (a_ij + lambda δij) - Σ_{m<j} l_im l_jm) / l_jj
      let s = (a[i * p + j] + (i === j ? lam[i] : 0)) * scale[i] * scale[j];
      const io = i * p;
      const jo = j * p;
      for (let m = 0; m < j; m++) s -= l[io + m] * l[jo + m];
      if (i === j) {
        if (!(s > 0)) return null;
        l[io + i] = Math.sqrt(s);
      } else {
        l[io + j] = s / l[jo + j];
      }
    }
  }
  return { p, lower: l, scale };
}

/** Solves (A + lambda I) X = B for B (p x h, row-major) with a factor from choleskyScaled. */
export function choleskySolve(f: CholeskyFactor, b: Float64Array, h: number, out: Float64Array = new Float64Array(b.length)): Float64Array {
  const { p, lower: l, scale } = f;
  // z = S b; forward L u = z; backward L^T v = u; x = S v.
  for (let i = 0; i < p; i++) {
    const s = scale[i];
    for (let c = 0; c < h; c++) out[i * h + c] = b[i * h + c] * s;
  }
  const k = simdKernels();
  if (k) {
    k.cholSolve(l, p, out, h, out);
    for (let i = 0; i < p; i++) {
      const s = scale[i];
      for (let c = 0; c < h; c++) out[i * h + c] *= s;
    }
    return out;
  }
  for (let i = 0; i < p; i++) {
    const io = i * h;
    for (let m = 0; m < i; m++) {
      const lim = l[i * p + m];
      if (lim === 0) continue;
      const mo = m * h;
      for (let c = 0; c < h; c++) out[io + c] -= lim * out[mo + c];
    }
    const inv = 1 / l[i * p + i];
    for (let c = 0; c < h; c++) out[io + c] *= inv;
  }
  for (let i = p - 1; i >= 0; i--) {
    const io = i * h;
    for (let m = i + 1; m < p; m++) {
      const lmi = l[m * p + i];
      if (lmi === 0) continue;
      const mo = m * h;
      for (let c = 0; c < h; c++) out[io + c] -= lmi * out[mo + c];
    }
    const inv = 1 / l[i * p + i];
    for (let c = 0; c < h; c++) out[io + c] *= inv;
  }
  for (let i = 0; i < p; i++) {
    const s = scale[i];
    for (let c = 0; c < h; c++) out[i * h + c] *= s;
  }
  return out;
}

export interface RidgeSolveResult {
  /** p x h weights. */
  w: Float64Array;
  /** Per-column ridge penalty actually used (raised when the system was singular). */
  lambda: Float64Array;
  /** The penalty was raised above the one asked for. */
  raised: boolean;
  factor: CholeskyFactor;
}

/**
 * Ridge least squares min |A W - Y|^2 + Σ_j lambda_j |W_j|^2 for all h columns of Y in one solve:
 * normal equations, equilibrated Cholesky, then `refineSteps` rounds of iterative refinement
 * W += (A^T A + Λ)^-1 (A^T (Y - A W) - Λ W) with residuals from the original data,
 * which recovers the digits the normal equations lose on ill-conditioned designs.
 * When the system is singular to working precision every lambda_j is raised to at least
 * rel * mean diagonal (rel = 1e-12, 1e-10, ... 1).
 */
export function ridgeSolve(
  a: Float64Array,
  p: number,
  y: Float64Array,
  h: number,
  r0: number,
  r1: number,
  lambda: number | Float64Array,
  refineSteps: number,
  gb?: { g: Float64Array; b: Float64Array },
): RidgeSolveResult | null {
  const { g, b } = gb ?? gramCross(a, p, y, h, r0, r1);
  const fr = factorRidge(g, p, lambda);
  if (fr === null) return null;
  const { factor: f, lambda: lam, raised } = fr;
  const w = choleskySolve(f, b, h);
  if (refineSteps > 0) {
    const dw = new Float64Array(p * h);
    const res = new Float64Array((r1 - r0) * h);
    for (let s = 0; s < refineSteps; s++) {
      // rhs = A^T (Y - A W) - Λ W, residuals from the original rows.
      residualRows(a, p, w, y, h, r0, r1, res);
      const rhs = crossRowsOffset(a, p, res, h, r0, r1);
      for (let i = 0; i < p; i++) {
        const li = lam[i];
        if (li !== 0) for (let c = 0; c < h; c++) rhs[i * h + c] -= li * w[i * h + c];
      }
      choleskySolve(f, rhs, h, dw);
      for (let i = 0; i < p * h; i++) w[i] += dw[i];
    }
  }
  return { w, lambda: lam, raised, factor: f };
}

/**
 * Cholesky factor of G + diag(lambda); when that is singular to working precision every lambda_j
 * is raised to at least rel * mean diagonal (rel = 1e-12, 1e-10, ... 1). Null if nothing works.
 */
export function factorRidge(g: Float64Array, p: number, lambda: number | Float64Array): { factor: CholeskyFactor; lambda: Float64Array; raised: boolean } | null {
  const asked = typeof lambda === 'number' ? new Float64Array(p).fill(lambda) : lambda;
  let lam = asked;
  let raised = false;
  let f = choleskyScaled(g, p, lam);
  if (f === null) {
    let tr = 0;
    for (let i = 0; i < p; i++) tr += g[i * p + i];
    const base = tr > 0 ? tr / p : 1;
    for (let rel = 1e-12; f === null && rel <= 1; rel *= 100) {
      lam = asked.map((v) => Math.max(v, rel * base));
      raised = true;
      f = choleskyScaled(g, p, lam);
    }
    if (f === null) return null;
  }
  return { factor: f, lambda: lam, raised };
}

/** A^T R for rows [r0, r1) of A when R's rows are indexed from 0. */
function crossRowsOffset(a: Float64Array, p: number, res: Float64Array, h: number, r0: number, r1: number): Float64Array {
  if (r0 === 0) return crossRows(a, p, res, h, 0, r1);
  return crossRows(a.subarray(r0 * p, r1 * p), p, res, h, 0, r1 - r0);
}

/**
 * Householder QR least squares min |A x - y| for one right-hand side (n >= p, full column rank).
 * Slower than the normal equations; used to check their accuracy (its error grows with cond(A),
 * not cond(A)^2). Returns null on exact rank deficiency.
 */
export function qrLeastSquares(aIn: Float64Array, n: number, p: number, yIn: Float64Array): Float64Array | null {
  const a = Float64Array.from(aIn);
  const y = Float64Array.from(yIn);
  const rdiag = new Float64Array(p);
  for (let k = 0; k < p; k++) {
    // Householder vector for column k; R's diagonal is -norm (the JAMA convention).
    let norm = 0;
    for (let i = k; i < n; i++) norm = Math.hypot(norm, a[i * p + k]);
    if (norm === 0) return null;
    if (a[k * p + k] < 0) norm = -norm;
    for (let i = k; i < n; i++) a[i * p + k] /= norm;
    a[k * p + k] += 1;
    const vkk = a[k * p + k];
    for (let j = k + 1; j < p; j++) {
      let s = 0;
      for (let i = k; i < n; i++) s += a[i * p + k] * a[i * p + j];
      s = -s / vkk;
      for (let i = k; i < n; i++) a[i * p + j] += s * a[i * p + k];
    }
    let s = 0;
    for (let i = k; i < n; i++) s += a[i * p + k] * y[i];
    s = -s / vkk;
    for (let i = k; i < n; i++) y[i] += s * a[i * p + k];
    rdiag[k] = -norm;
  }
  // Back substitution R x = Q^T y (R strictly upper part sits above the diagonal of a).
  const x = new Float64Array(p);
  for (let k = p - 1; k >= 0; k--) {
    let s = y[k];
    for (let j = k + 1; j < p; j++) s -= a[k * p + j] * x[j];
    x[k] = s / rdiag[k];
  }
  return x;
}
