/**
 * Gaussian RBF network for many outputs at once:
 *   h(x) = b + Σ_k w_k exp(-γ_k |x - μ_k|^2) + Σ_j v_j x_j        (one weight column per output)
 * Evaluation, the width gradient, model checks and prediction; the fit is in fit.ts.
 */
import type { Dense, Prediction, RbfModel } from './types.ts';
import { ModelError } from './errors.ts';
import { checkDense } from './check.ts';
import { dist2All, rowNorms2, simdKernels } from './distance.ts';
import { matmul } from './blas.ts';

/**
 * Gradient of the MSE with respect to log γ_k with the weights fixed, from the residuals
 * r = Y - Phi W (nRows x H), the activations e (nRows x K), the squared distances d2 (nRows x K)
 * and the Gaussian weight rows wGauss (K x H):
 *   ∂E/∂log γ_k = (2 γ_k / (n H)) Σ_n (Σ_h r_nh w_kh) e_nk d2_nk
 * One value per centre; for a shared width the derivative is their sum.
 */
export function logGammaGradient(res: Float64Array, e: Float64Array, d2: Float64Array, nRows: number, nCentres: number, gammas: Float64Array, wGauss: Float64Array, h: number): Float64Array {
  const K = nCentres;
  // G = R W_g^T (nRows x K) in one product, then acc_k = Σ_n G[n,k] e[n,k] d2[n,k].
  const wgT = new Float64Array(h * K);
  for (let k = 0; k < K; k++) for (let c = 0; c < h; c++) wgT[c * K + k] = wGauss[k * h + c];
  const gm = matmul(res, nRows, h, wgT, K);
  const acc = new Float64Array(K);
  for (let n = 0; n < nRows; n++) {
    const o = n * K;
    for (let k = 0; k < K; k++) acc[k] += gm[o + k] * e[o + k] * d2[o + k];
  }
  const out = new Float64Array(K);
  for (let k = 0; k < K; k++) out[k] = ((2 * gammas[k]) / (nRows * h)) * acc[k];
  return out;
}

/**
 * Gaussian activations out[n, k] = exp(-γ_k d2[n, k]) of nRows rows of K squared distances: the
 * SIMD kernel when available (within 2 ulp of Math.exp, about 3.5x faster), else Math.exp.
 */
export function gaussianActivations(gammas: Float64Array, d2: Float64Array, nRows: number, K: number, out: Float64Array = new Float64Array(nRows * K)): Float64Array {
  const s = simdKernels();
  if (s) return s.expNeg(gammas, d2, nRows, K, out);
  for (let n = 0; n < nRows; n++) for (let k = 0; k < K; k++) out[n * K + k] = Math.exp(-gammas[k] * d2[n * K + k]);
  return out;
}

/** Checks a model's internal consistency (sizes, finite numbers, positive widths). */
export function checkModel(m: RbfModel, where = 'model'): void {
  const bad = (msg: string, field: string, value?: number | string, expected?: number | string): never => {
    throw new ModelError('BAD_MODEL', msg, { where: `${where}.${field}`, ...(value !== undefined ? { value } : {}), ...(expected !== undefined ? { expected } : {}) }, 'refit the model; the stored one is damaged or from another version');
  };
  if (m === null || typeof m !== 'object') bad('is not an object', '', String(m));
  if (m.version !== 1) bad(`version ${String(m.version)} is not supported`, 'version', String(m.version), 1);
  for (const f of ['nFeatures', 'nCentres', 'nOutputs'] as const) {
    if (!Number.isInteger(m[f]) || m[f] < 1) bad(`${String(m[f])} is not a positive integer`, f, String(m[f]));
  }
  if (m.widthMode !== 'shared' && m.widthMode !== 'per-centre') bad(`unknown width mode ${String(m.widthMode)}`, 'widthMode', String(m.widthMode));
  if (typeof m.linearTerms !== 'boolean') bad('must be a boolean', 'linearTerms', String(m.linearTerms));
  if (!Number.isInteger(m.seed)) bad('must be an integer', 'seed', String(m.seed));
  const arr = (field: 'centres' | 'gammas' | 'weights', len: number, positive: boolean): void => {
    const a = m[field];
    if (!Array.isArray(a)) bad('must be an array of numbers', field);
    if (a.length !== len) bad(`has ${a.length} values, expected ${len}`, field, a.length, len);
    for (let i = 0; i < a.length; i++) {
      const v = a[i];
      if (typeof v !== 'number' || !Number.isFinite(v) || (positive && !(v > 0))) bad(`value ${String(v)} at index ${i} is not a ${positive ? 'positive ' : ''}finite number`, `${field}[${i}]`, String(v));
    }
  };
  if (m.gaussianRidge !== undefined && !(typeof m.gaussianRidge === 'number' && m.gaussianRidge >= 0 && Number.isFinite(m.gaussianRidge))) {
    bad('must be a non-negative number', 'gaussianRidge', String(m.gaussianRidge));
  }
  for (const f of ['widthRest', 'widthRestLength'] as const) {
    if (m[f] !== undefined && !(Number.isInteger(m[f]) && (m[f] as number) >= 0 && (m[f] as number) <= 1_000)) bad('must be a whole number in 0..1000', f, String(m[f]));
  }
  arr('centres', m.nCentres * m.nFeatures, false);
  arr('gammas', m.nCentres, true);
  arr('weights', (1 + m.nCentres + (m.linearTerms ? m.nFeatures : 0)) * m.nOutputs, false);
}

/** Predicts all outputs for every row of x, with each row's novelty (largest Gaussian activation). */
export function predictRbf(model: RbfModel, x: Dense): Prediction {
  checkModel(model);
  checkDense(x, 'x');
  if (x.cols !== model.nFeatures) {
    throw new ModelError('DIMENSION_MISMATCH', `x has ${x.cols} features but the model was fitted on ${model.nFeatures}`, { where: 'x', value: x.cols, expected: model.nFeatures }, 'build prediction inputs with the same feature options as the fit');
  }
  const n = x.rows;
  const d = model.nFeatures;
  const K = model.nCentres;
  const H = model.nOutputs;
  const centres = Float64Array.from(model.centres);
  const gammas = Float64Array.from(model.gammas);
  const w = Float64Array.from(model.weights);
  const d2 = dist2All(x.data, n, d, centres, K, new Float64Array(n * K), rowNorms2(x.data, n, d));
  const e = gaussianActivations(gammas, d2, n, K, d2);
  const out = new Float64Array(n * H);
  const novelty = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let best = 0;
    for (let k = 0; k < K; k++) if (e[i * K + k] > best) best = e[i * K + k];
    novelty[i] = best;
    const oo = i * H;
    for (let c = 0; c < H; c++) out[oo + c] = w[c];
    for (let k = 0; k < K; k++) {
      const a = e[i * K + k];
      const wo = (1 + k) * H;
      for (let c = 0; c < H; c++) out[oo + c] += a * w[wo + c];
    }
    if (model.linearTerms) {
      for (let j = 0; j < d; j++) {
        const v = x.data[i * d + j];
        const wo = (1 + K + j) * H;
        for (let c = 0; c < H; c++) out[oo + c] += v * w[wo + c];
      }
    }
  }
  return { y: { data: out, rows: n, cols: H }, novelty };
}
