/**
 * Gaussian RBF network for many outputs at once:
 *   h(x) = b + Σ_k w_k exp(-γ_k |x - μ_k|^2) + Σ_j v_j x_j        (one weight column per output)
 * Centres from k-means, initial widths from the cluster spread, weights by ridge least squares,
 * then alternating updates: widths by backtracking gradient steps on log γ with the weights
 * fixed, weights re-solved exactly with the widths fixed, each step judged on a validation tail.
 */
import type { Dense, FitHistoryEntry, FitOptions, FitReport, Prediction, RbfModel } from './types.ts';
import { ModelError } from './errors.ts';
import { checkDense, checkInt, checkNumber } from './check.ts';
import { kmeans } from './kmeans.ts';
import { dist2All, rowNorms2 } from './distance.ts';
import { ridgeSolve } from './linalg.ts';
import { gramCross, matmul, residualRows } from './blas.ts';

/** Defaults of every fit option (the one place they live). */
export const DEFAULT_FIT_OPTIONS: Readonly<Required<Omit<FitOptions, 'warmStart'>>> = Object.freeze({
  nCentres: 32,
  widthMode: 'per-centre',
  ridge: 1e-6,
  linearTerms: true,
  bias: true,
  restarts: 3,
  maxPasses: 100,
  widthIterations: 5,
  widthTol: 1e-3,
  validationFraction: 0.2,
  seed: 1,
  subsampleRows: 0,
  kmeansTol: 1e-4,
  warmMaxPasses: 10,
  refitAllRows: true,
  ridgeSearch: true,
});

/** Candidate shrinkages of the Gaussian weights (relative to each column's Gram diagonal). */
const RIDGE_GRID = [1e-4, 1e-2, 1, 100];

/** Per-centre widths are kept within this factor of the shared width (tiny clusters give wild spreads). */
const WIDTH_SPREAD_LIMIT = 10;
/** Largest first step on log γ (a factor e^0.5 on the widest-moving width). */
const FIRST_LOG_STEP = 0.5;
const MAX_HALVINGS = 8;
/** One round of iterative refinement on the final weight solve (Longley: 7.2 -> 11.1 digits). */
const FINAL_REFINE_STEPS = 1;

/** The fitted network in working form (typed arrays). */
interface Net {
  nFeatures: number;
  nCentres: number;
  nOutputs: number;
  centres: Float64Array;
  gammas: Float64Array;
  /** Features that enter as linear terms (constant ones are left out; their weights are 0). */
  linIdx: Int32Array;
}

/**
 * Design matrix rows [0, nRows): [1 | exp(-γ_k d2[n,k]) | x[n, linIdx]] -> out (nRows x P),
 * with P = 1 + K + linIdx.length.
 */
export function designMatrix(d2: Float64Array, nRows: number, nCentres: number, gammas: Float64Array, x: Float64Array, nFeatures: number, linIdx: Int32Array, out: Float64Array, bias = 1): void {
  const K = nCentres;
  const L = linIdx.length;
  const P = 1 + K + L;
  for (let n = 0; n < nRows; n++) {
    const o = n * P;
    const dOff = n * K;
    out[o] = bias;
    for (let k = 0; k < K; k++) out[o + 1 + k] = Math.exp(-gammas[k] * d2[dOff + k]);
    const xo = n * nFeatures;
    for (let j = 0; j < L; j++) out[o + 1 + K + j] = x[xo + linIdx[j]];
  }
}

/** Mean squared error of Phi W against Y over rows [r0, r1), all outputs. */
export function mseRows(phi: Float64Array, p: number, w: Float64Array, y: Float64Array, h: number, r0: number, r1: number, scratch?: Float64Array): number {
  if (r1 <= r0) return NaN;
  const r = residualRows(phi, p, w, y, h, r0, r1, scratch ?? new Float64Array((r1 - r0) * h));
  let s = 0;
  for (let i = 0; i < (r1 - r0) * h; i++) s += r[i] * r[i];
  return s / ((r1 - r0) * h);
}

/**
 * Gradient of the training MSE with respect to log γ_k, weights fixed (rows [r0, r1)):
 *   ∂E/∂log γ_k = -(2 γ_k / (n H)) Σ_n (Σ_h r_nh w_kh) φ_nk d2_nk,   r = Phi W - Y
 * Returns one value per centre; for a shared width the derivative is their sum.
 */
export function logGammaGradient(phi: Float64Array, p: number, d2: Float64Array, nCentres: number, gammas: Float64Array, w: Float64Array, y: Float64Array, h: number, r0: number, r1: number): Float64Array {
  const K = nCentres;
  const nRows = r1 - r0;
  // residual() gives Y - Phi W; the sign is folded into the final factor.
  const res = residualRows(phi, p, w, y, h, r0, r1);
  // G = R W_g^T (nRows x K), then acc_k = Σ_n G[n,k] φ[n,k] d2[n,k].
  const wgT = new Float64Array(h * K);
  for (let k = 0; k < K; k++) for (let c = 0; c < h; c++) wgT[c * K + k] = w[(1 + k) * h + c];
  const gm = matmul(res, nRows, h, wgT, K);
  const acc = new Float64Array(K);
  for (let n = 0; n < nRows; n++) {
    const po = (n + r0) * p + 1;
    const dOff = (n + r0) * K;
    const go = n * K;
    for (let k = 0; k < K; k++) acc[k] += gm[go + k] * phi[po + k] * d2[dOff + k];
  }
  const out = new Float64Array(K);
  for (let k = 0; k < K; k++) out[k] = (2 * gammas[k] / (nRows * h)) * acc[k];
  return out;
}

function resolveOptions(opts: FitOptions): Required<Omit<FitOptions, 'warmStart'>> & { warmStart?: RbfModel } {
  const o = { ...DEFAULT_FIT_OPTIONS, ...opts } as Required<Omit<FitOptions, 'warmStart'>> & { warmStart?: RbfModel };
  for (const k of Object.keys(DEFAULT_FIT_OPTIONS) as (keyof typeof DEFAULT_FIT_OPTIONS)[]) {
    if ((o as Record<string, unknown>)[k] === undefined) (o as Record<string, unknown>)[k] = DEFAULT_FIT_OPTIONS[k];
  }
  checkInt(o.nCentres, 'opts.nCentres', 1);
  if (o.widthMode !== 'shared' && o.widthMode !== 'per-centre') {
    throw new ModelError('BAD_OPTION', `widthMode "${String(o.widthMode)}" is not known`, { where: 'opts.widthMode', value: String(o.widthMode), expected: 'shared | per-centre' }, 'use "shared" or "per-centre"');
  }
  checkNumber(o.ridge, 'opts.ridge', 0, 1);
  if (typeof o.linearTerms !== 'boolean') throw new ModelError('BAD_OPTION', 'linearTerms must be true or false', { where: 'opts.linearTerms', value: String(o.linearTerms) }, 'set linearTerms to a boolean');
  checkInt(o.restarts, 'opts.restarts', 1, 1000);
  checkInt(o.maxPasses, 'opts.maxPasses', 1);
  checkInt(o.widthIterations, 'opts.widthIterations', 0, 10000);
  checkNumber(o.widthTol, 'opts.widthTol', 0, 1);
  checkNumber(o.validationFraction, 'opts.validationFraction', 0, 0.9);
  checkInt(o.seed, 'opts.seed', -0x80000000, 0xffffffff);
  checkInt(o.subsampleRows, 'opts.subsampleRows', 0);
  checkNumber(o.kmeansTol, 'opts.kmeansTol', 0, Infinity);
  checkInt(o.warmMaxPasses, 'opts.warmMaxPasses', 1);
  if (typeof o.bias !== 'boolean') throw new ModelError('BAD_OPTION', 'bias must be true or false', { where: 'opts.bias', value: String(o.bias) }, 'set bias to a boolean');
  if (typeof o.ridgeSearch !== 'boolean') throw new ModelError('BAD_OPTION', 'ridgeSearch must be true or false', { where: 'opts.ridgeSearch', value: String(o.ridgeSearch) }, 'set ridgeSearch to a boolean');
  if (typeof o.refitAllRows !== 'boolean') throw new ModelError('BAD_OPTION', 'refitAllRows must be true or false', { where: 'opts.refitAllRows', value: String(o.refitAllRows) }, 'set refitAllRows to a boolean');
  return o;
}

/** Initial widths from the data: γ_k = 1 / (mean squared distance of cluster k's members to μ_k). */
function initialGammas(d2: Float64Array, labels: Int32Array, nSamples: number, nCentres: number, mode: 'shared' | 'per-centre'): Float64Array {
  const K = nCentres;
  const sum = new Float64Array(K);
  const cnt = new Int32Array(K);
  let total = 0;
  for (let n = 0; n < nSamples; n++) {
    const k = labels[n];
    const v = d2[n * K + k];
    sum[k] += v;
    cnt[k]++;
    total += v;
  }
  // Shared spread: mean squared distance of every sample to its own centre.
  let msdAll = total / nSamples;
  if (!(msdAll > 0)) {
    // Every sample sits on a centre (e.g. one centre per sample): use the centre spacing instead.
    let s = 0;
    let m = 0;
    for (let n = 0; n < nSamples; n++) {
      let best = Infinity;
      for (let k = 0; k < K; k++) if (k !== labels[n] && d2[n * K + k] < best && d2[n * K + k] > 0) best = d2[n * K + k];
      if (Number.isFinite(best)) {
        s += best;
        m++;
      }
    }
    msdAll = m > 0 && s > 0 ? s / m : 1;
  }
  const g = new Float64Array(K);
  for (let k = 0; k < K; k++) {
    let msd = msdAll;
    if (mode === 'per-centre' && cnt[k] >= 2 && sum[k] > 0) {
      msd = Math.min(Math.max(sum[k] / cnt[k], msdAll / WIDTH_SPREAD_LIMIT), msdAll * WIDTH_SPREAD_LIMIT);
    }
    g[k] = 1 / msd;
  }
  return g;
}

/** Columns that vary over the rows (constant columns cannot be told apart from the bias). */
function varyingColumns(x: Float64Array, nRows: number, nFeatures: number): Int32Array {
  const keep: number[] = [];
  for (let j = 0; j < nFeatures; j++) {
    const first = x[j];
    let varies = false;
    for (let n = 1; n < nRows; n++) {
      if (x[n * nFeatures + j] !== first) {
        varies = true;
        break;
      }
    }
    if (varies) keep.push(j);
  }
  return Int32Array.from(keep);
}

/** Whether a previous model can seed this fit (same features, centres and outputs layout). */
export function warmStartUsable(prev: RbfModel | undefined, nFeatures: number, nCentres: number): prev is RbfModel {
  return prev !== undefined && prev.nFeatures === nFeatures && prev.nCentres === nCentres && prev.centres.length === nCentres * nFeatures && prev.gammas.length === nCentres;
}

/**
 * Fits a network to x (nSamples x nFeatures) and y (nSamples x nOutputs), rows in time order.
 * The last `validationFraction` of the rows is the validation tail on which every width step is
 * judged; with `refitAllRows` the final weights are solved on all rows with the chosen widths.
 */
export function fitRbf(x: Dense, y: Dense, options: FitOptions): { model: RbfModel; report: FitReport } {
  checkDense(x, 'x');
  checkDense(y, 'y');
  const o = resolveOptions(options);
  const nSamples = x.rows;
  const nFeatures = x.cols;
  const nOutputs = y.cols;
  const K = o.nCentres;
  if (y.rows !== nSamples) {
    throw new ModelError('DIMENSION_MISMATCH', `y has ${y.rows} rows but x has ${nSamples}`, { where: 'y', value: y.rows, expected: nSamples }, 'pass one target row per feature row');
  }
  if (K > nSamples) {
    throw new ModelError('TOO_FEW_SAMPLES', `nCentres=${K} is larger than the ${nSamples} samples`, { where: 'opts.nCentres', value: K, expected: `<= ${nSamples}` }, 'use fewer centres or a longer training window');
  }
  let nVal = Math.floor(nSamples * o.validationFraction);
  if (nSamples - nVal < 2) nVal = 0;
  const nTrain = nSamples - nVal;

  const warm = warmStartUsable(o.warmStart, nFeatures, K) ? o.warmStart : undefined;
  const km = kmeans(x, {
    nCentres: K,
    restarts: o.restarts,
    maxPasses: warm ? Math.min(o.maxPasses, o.warmMaxPasses) : o.maxPasses,
    tol: o.kmeansTol,
    seed: o.seed,
    subsampleRows: o.subsampleRows,
    ...(warm ? { initialCentres: { data: Float64Array.from(warm.centres), rows: K, cols: nFeatures } } : {}),
  });
  const d2 = km.dist2.data;

  let gammas: Float64Array;
  if (warm && warm.gammas.every((g) => Number.isFinite(g) && g > 0)) {
    gammas = Float64Array.from(warm.gammas);
    if (o.widthMode === 'shared') {
      // Geometric mean: the shared width closest to the previous per-centre ones.
      let s = 0;
      for (let k = 0; k < K; k++) s += Math.log(gammas[k]);
      gammas.fill(Math.exp(s / K));
    }
  } else {
    gammas = initialGammas(d2, km.labels, nSamples, K, o.widthMode);
  }

  const linIdx = o.linearTerms ? varyingColumns(x.data, nSamples, nFeatures) : new Int32Array(0);
  const P = 1 + K + linIdx.length;
  const H = nOutputs;
  let phi = new Float64Array(nSamples * P);
  let trial = new Float64Array(nSamples * P);
  const scratch = new Float64Array(nSamples * H);

  const biasValue = o.bias ? 1 : 0;
  /**
   * Ridge per column. Linear columns: λ_j = ridge * G_jj, relative to the column's own scale so it
   * does not depend on feature units. Gaussian columns share one unit (activations in [0, 1]):
   * λ = gaussianRidge * mean_k G_kk, so a unit that barely fires on the training rows cannot get a
   * huge weight. The bias is not penalised; without a bias its all-zero column gets a unit diagonal.
   */
  let gaussianRidge = o.ridge;
  let ridgeRaised = false;
  const penalties = (g: Float64Array, gRidge: number): Float64Array => {
    const lam = new Float64Array(P);
    let meanG = 0;
    for (let j = 1; j <= K; j++) meanG += g[j * P + j] / K;
    for (let j = 1; j <= K; j++) lam[j] = gRidge * meanG;
    for (let j = K + 1; j < P; j++) lam[j] = o.ridge * g[j * P + j];
    return lam;
  };
  const solveWith = (g: Float64Array, b: Float64Array, rows: number, refineSteps: number, gRidge: number): Float64Array => {
    const r = ridgeSolve(phi, P, y.data, H, 0, rows, penalties(g, gRidge), refineSteps, { g, b });
    if (r === null) {
      throw new ModelError('SINGULAR_SYSTEM', `the ${P}x${P} weight system is singular even with a raised ridge`, { where: 'fit', value: P }, 'raise opts.ridge or use fewer centres');
    }
    if (r.raised) ridgeRaised = true;
    return r.w;
  };
  const normal = (rows: number): { g: Float64Array; b: Float64Array } => {
    const { g, b } = gramCross(phi, P, y.data, H, 0, rows);
    if (!o.bias) g[0] = 1;
    return { g, b };
  };
  const solve = (rows: number, refineSteps: number): Float64Array => {
    const { g, b } = normal(rows);
    return solveWith(g, b, rows, refineSteps, gaussianRidge);
  };

  designMatrix(d2, nSamples, K, gammas, x.data, nFeatures, linIdx, phi, biasValue);
  let w: Float64Array;
  if (nVal > 0 && o.ridgeSearch) {
    // Shrinkage of the Gaussian weights chosen on the validation tail; the largest candidate is
    // almost the linear model, so a series that is nearly linear is not made worse by the Gaussians.
    const { g, b } = normal(nTrain);
    let bestVal = Infinity;
    w = new Float64Array(0);
    for (const r of RIDGE_GRID.filter((v) => v > o.ridge).concat([o.ridge]).sort((a, c) => a - c)) {
      const wr = solveWith(g, b, nTrain, 0, r);
      const v = mseRows(phi, P, wr, y.data, H, nTrain, nSamples, scratch);
      if (v < bestVal) {
        bestVal = v;
        w = wr;
        gaussianRidge = r;
      }
    }
  } else {
    w = solve(nTrain, 0);
  }
  let trainMse = mseRows(phi, P, w, y.data, H, 0, nTrain, scratch);
  let valMse = nVal > 0 ? mseRows(phi, P, w, y.data, H, nTrain, nSamples, scratch) : NaN;
  const judge = (tr: number, va: number): number => (nVal > 0 ? va : tr);
  let bestCrit = judge(trainMse, valMse);
  const history: FitHistoryEntry[] = [{ iteration: 0, trainMse, validationMse: valMse, accepted: true }];
  let step = FIRST_LOG_STEP;

  for (let it = 1; it <= o.widthIterations; it++) {
    const gk = logGammaGradient(phi, P, d2, K, gammas, w, y.data, H, 0, nTrain);
    const grad = new Float64Array(K);
    if (o.widthMode === 'shared') {
      let s = 0;
      for (let k = 0; k < K; k++) s += gk[k];
      grad.fill(s);
    } else grad.set(gk);
    let gmax = 0;
    let gnorm2 = 0;
    for (let k = 0; k < K; k++) {
      gmax = Math.max(gmax, Math.abs(grad[k]));
      gnorm2 += o.widthMode === 'shared' ? (k === 0 ? grad[k] * grad[k] : 0) : grad[k] * grad[k];
    }
    if (!(gmax > 0)) break;
    // Backtracking on log γ with the weights fixed (Armijo condition on the training MSE).
    let t = step;
    let found = false;
    const cand = new Float64Array(K);
    for (let half = 0; half <= MAX_HALVINGS; half++) {
      for (let k = 0; k < K; k++) cand[k] = gammas[k] * Math.exp(-(t / gmax) * grad[k]);
      designMatrix(d2, nTrain, K, cand, x.data, nFeatures, linIdx, trial, biasValue);
      const f = mseRows(trial, P, w, y.data, H, 0, nTrain, scratch);
      if (f <= trainMse - 1e-4 * (t / gmax) * gnorm2) {
        found = true;
        break;
      }
      t /= 2;
    }
    if (!found) break;
    // Weights re-solved exactly for the new widths; the step stands only if validation improves.
    designMatrix(d2, nSamples, K, cand, x.data, nFeatures, linIdx, trial, biasValue);
    [phi, trial] = [trial, phi];
    const candW = solve(nTrain, 0);
    const candTrain = mseRows(phi, P, candW, y.data, H, 0, nTrain, scratch);
    const candVal = nVal > 0 ? mseRows(phi, P, candW, y.data, H, nTrain, nSamples, scratch) : NaN;
    const crit = judge(candTrain, candVal);
    const accepted = crit <= bestCrit;
    history.push({ iteration: it, trainMse: candTrain, validationMse: candVal, accepted });
    if (!accepted) {
      [phi, trial] = [trial, phi]; // keep the previous widths and weights
      break;
    }
    const rel = bestCrit > 0 ? (bestCrit - crit) / bestCrit : 0;
    gammas = cand.slice();
    w = candW;
    trainMse = candTrain;
    valMse = candVal;
    bestCrit = crit;
    step = Math.min(2 * t, 2 * FIRST_LOG_STEP);
    if (rel < o.widthTol) break;
  }

  // Final weights for the chosen widths, with iterative refinement.
  const finalRows = nVal > 0 && o.refitAllRows ? nSamples : nTrain;
  w = solve(finalRows, FINAL_REFINE_STEPS);
  const finalMse = mseRows(phi, P, w, y.data, H, 0, finalRows, scratch);

  // Weights in the model layout: bias row, K Gaussian rows, then one row per feature (0 if left out).
  const nLinRows = o.linearTerms ? nFeatures : 0;
  const weights = new Array<number>((1 + K + nLinRows) * H).fill(0);
  for (let i = 0; i < 1 + K; i++) for (let c = 0; c < H; c++) weights[i * H + c] = w[i * H + c];
  for (let j = 0; j < linIdx.length; j++) {
    const src = (1 + K + j) * H;
    const dst = (1 + K + linIdx[j]) * H;
    for (let c = 0; c < H; c++) weights[dst + c] = w[src + c];
  }
  const model: RbfModel = {
    version: 1,
    nFeatures,
    nCentres: K,
    nOutputs: H,
    widthMode: o.widthMode,
    linearTerms: o.linearTerms,
    centres: Array.from(km.centres.data),
    gammas: Array.from(gammas),
    weights,
    seed: o.seed,
  };
  const report: FitReport = {
    kmeansPasses: km.passes,
    inertia: km.inertia,
    history,
    trainMse: finalMse,
    validationMse: valMse,
    nTrainRows: nTrain,
    nValidationRows: nVal,
    warmStarted: warm !== undefined,
    gaussianRidge,
    ridgeRaised,
  };
  return { model, report };
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
  const out = new Float64Array(n * H);
  const novelty = new Float64Array(n);
  const phiK = new Float64Array(K);
  for (let i = 0; i < n; i++) {
    let best = 0;
    for (let k = 0; k < K; k++) {
      const a = Math.exp(-gammas[k] * d2[i * K + k]);
      phiK[k] = a;
      if (a > best) best = a;
    }
    novelty[i] = best;
    const oo = i * H;
    for (let c = 0; c < H; c++) out[oo + c] = w[c];
    for (let k = 0; k < K; k++) {
      const a = phiK[k];
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
