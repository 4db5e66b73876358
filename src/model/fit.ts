/**
 * The fit: k-means centres, initial widths from the cluster spread, ridge weights for all outputs
 * in one solve, then alternating updates (weights exact for fixed widths, backtracking gradient
 * steps on log γ for fixed weights), each step judged on the validation tail.
 */
import type { Dense, FitHistoryEntry, FitOptions, FitReport, RbfModel } from './types.ts';
import { ModelError } from './errors.ts';
import { checkDense, checkInt, checkNumber } from './check.ts';
import { kmeansChecked } from './kmeans.ts';
import { choleskySolve, factorRidge, type CholeskyFactor } from './linalg.ts';
import { crossRows, crossWithSelf, matmul } from './blas.ts';
import { gaussianActivations, logGammaGradient } from './rbf.ts';

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
  warmMaxPasses: 3,
  warmWidthIterations: 1,
  warmWidthRest: 8,
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
/**
 * Refinement is only needed for (nearly) unpenalised solves: with ridge r the equilibrated system
 * has condition number below about P / r, so Cholesky alone keeps ~16 - log10(P / r) digits.
 */
const REFINE_BELOW_RIDGE = 1e-8;


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
  checkInt(o.warmWidthIterations, 'opts.warmWidthIterations', 0, 10000);
  checkInt(o.warmWidthRest, 'opts.warmWidthRest', 0, 1000);
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

/** Products of one block of columns with [F | Y] over the training and the validation rows. */
interface Products {
  train: Float64Array;
  val: Float64Array | null;
}

/**
 * Fits a network to x (nSamples x nFeatures) and y (nSamples x nOutputs), rows in time order.
 * The last `validationFraction` of the rows is the validation tail on which every width step is
 * judged; with `refitAllRows` the final weights are solved on all rows with the chosen widths.
 *
 * Internally the design matrix Phi = [1 | E | X_lin] is kept as two parts: the fixed columns
 * F = [1 | X_lin] (their products are computed once) and the Gaussian activations E, whose
 * products E^T [E | F | Y] are the only ones recomputed when the widths change.
 */
export function fitRbf(x: Dense, y: Dense, options: FitOptions): { model: RbfModel; report: FitReport } {
  checkDense(x, 'x');
  checkDense(y, 'y');
  const o = resolveOptions(options);
  const nSamples = x.rows;
  const nFeatures = x.cols;
  const H = y.cols;
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
  const km = kmeansChecked(x, {
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

  // Fixed columns F = [bias | x_lin] and FY = [F | Y], row-major.
  const linIdx = o.linearTerms ? varyingColumns(x.data, nSamples, nFeatures) : new Int32Array(0);
  const nF = 1 + linIdx.length;
  const nFY = nF + H;
  const P = 1 + K + linIdx.length;
  const f = new Float64Array(nSamples * nF);
  const fy = new Float64Array(nSamples * nFY);
  const biasValue = o.bias ? 1 : 0;
  const nLin = linIdx.length;
  const xd = x.data;
  const yd = y.data;
  for (let n = 0; n < nSamples; n++) {
    const fo = n * nF;
    const fyo = n * nFY;
    const xo = n * nFeatures;
    f[fo] = biasValue;
    fy[fyo] = biasValue;
    for (let j = 0; j < nLin; j++) {
      const v = xd[xo + linIdx[j]];
      f[fo + 1 + j] = v;
      fy[fyo + 1 + j] = v;
    }
    const yo = n * H;
    for (let c = 0; c < H; c++) fy[fyo + nF + c] = yd[yo + c];
  }
  /** A^T [A | F | Y] style products of a block (nCols wide) over train and validation rows. */
  const products = (a: Float64Array, nCols: number, withSelf: boolean, rhs: Float64Array, nRhs: number): Products => ({
    train: productRows(a, nCols, rhs, nRhs, 0, nTrain, withSelf),
    val: nVal > 0 ? productRows(a, nCols, rhs, nRhs, nTrain, nSamples, withSelf) : null,
  });
  // F^T [F | Y]: fixed for the whole fit.
  const fProd = products(f, nF, false, fy, nFY);

  /** Phi column of F column j (F = [bias | x_lin], Phi = [bias | E | x_lin]). */
  const phiOfF = (j: number): number => (j === 0 ? 0 : K + j);
  /** Assembles Phi^T Phi (P x P) and Phi^T Y (P x H) from the block products of one row set. */
  const assemble = (eP: Float64Array, fP: Float64Array, into?: { g: Float64Array; b: Float64Array }): { g: Float64Array; b: Float64Array } => {
    const g = into?.g ?? new Float64Array(P * P);
    const b = into?.b ?? new Float64Array(P * H);
    const add = into !== undefined;
    const wE = K + nFY; // row width of eP: [E | F | Y]
    for (let k = 0; k < K; k++) {
      const row = 1 + k;
      for (let k2 = 0; k2 < K; k2++) put(g, row * P + 1 + k2, eP[k * wE + k2], add);
      for (let j = 0; j < nF; j++) {
        const v = eP[k * wE + K + j];
        put(g, row * P + phiOfF(j), v, add);
        put(g, phiOfF(j) * P + row, v, add);
      }
      for (let c = 0; c < H; c++) put(b, row * H + c, eP[k * wE + K + nF + c], add);
    }
    for (let j = 0; j < nF; j++) {
      const pj = phiOfF(j);
      for (let j2 = 0; j2 < nF; j2++) put(g, pj * P + phiOfF(j2), fP[j * nFY + j2], add);
      for (let c = 0; c < H; c++) put(b, pj * H + c, fP[j * nFY + nF + c], add);
    }
    if (!o.bias && !add) g[0] = 1; // all-zero bias column: unit diagonal keeps the system definite
    return { g, b };
  };

  /**
   * Ridge per column. Linear columns: λ_j = ridge * G_jj, relative to the column's own scale so it
   * does not depend on feature units. Gaussian columns share one unit (activations in [0, 1]):
   * λ = gaussianRidge * mean_k G_kk, so a unit that barely fires on the training rows cannot get a
   * huge weight. The bias is not penalised.
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
  const factor = (g: Float64Array, gRidge: number): { factor: CholeskyFactor; lambda: Float64Array } => {
    const fr = factorRidge(g, P, penalties(g, gRidge));
    if (fr === null) {
      throw new ModelError('SINGULAR_SYSTEM', `the ${P}x${P} weight system is singular even with a raised ridge`, { where: 'fit', value: P }, 'raise opts.ridge or use fewer centres');
    }
    if (fr.raised) ridgeRaised = true;
    return fr;
  };

  /** Weights split into the Gaussian rows (K x H) and the fixed-column rows (nF x H). */
  const split = (w: Float64Array): { wE: Float64Array; wF: Float64Array } => {
    const wE = w.slice(H, (1 + K) * H);
    const wF = new Float64Array(nF * H);
    for (let j = 0; j < nF; j++) wF.set(w.subarray(phiOfF(j) * H, (phiOfF(j) + 1) * H), j * H);
    return { wE, wF };
  };
  /** Residuals Y - F W_F - E W_E over rows [r0, r1) (indexed from 0) and their mean square. */
  const residuals = (e: Float64Array, wE: Float64Array, wF: Float64Array, r0: number, r1: number): { res: Float64Array; mse: number } => {
    const m = r1 - r0;
    const pf = matmul(f.subarray(r0 * nF, r1 * nF), m, nF, wF, H);
    const pe = matmul(e.subarray(r0 * K, r1 * K), m, K, wE, H);
    const res = new Float64Array(m * H);
    let s = 0;
    for (let i = 0; i < m * H; i++) {
      const v = y.data[r0 * H + i] - pf[i] - pe[i];
      res[i] = v;
      s += v * v;
    }
    return { res, mse: s / (m * H) };
  };

  /** Σ y^2 over the training and the validation rows (for errors from the normal equations). */
  let yyTrain = 0;
  let yyVal = 0;
  for (let i = 0; i < nTrain * H; i++) yyTrain += yd[i] * yd[i];
  for (let i = nTrain * H; i < nSamples * H; i++) yyVal += yd[i] * yd[i];
  /**
   * Mean squared error of weights W from the normal equations of a row set, without a pass over
   * the rows: |Y - Phi W|^2 = Σ y^2 - 2 <W, B> + <W, G W>. The terms are of the size of Σ y^2, so
   * the relative rounding error is about 1e-16 * Σ y^2 / |Y - Phi W|^2 (negligible unless the
   * fit is near exact, where it is clipped at 0).
   */
  const quadMse = (sys: { g: Float64Array; b: Float64Array }, w: Float64Array, yy: number, nRows: number): number => {
    const gw = matmul(sys.g, P, P, w, H);
    if (!o.bias) gw.fill(0, 0, H); // the bias row of g carries the unit-diagonal stand-in
    let wb = 0;
    let wgw = 0;
    for (let i = 0; i < P * H; i++) {
      wb += w[i] * sys.b[i];
      wgw += w[i] * gw[i];
    }
    return Math.max(0, yy - 2 * wb + wgw) / (nRows * H);
  };

  /** Everything that depends on the widths: activations, normal equations, weights, errors. */
  interface State {
    gammas: Float64Array;
    e: Float64Array;
    gTrain: { g: Float64Array; b: Float64Array };
    gVal: { g: Float64Array; b: Float64Array } | null;
    w: Float64Array;
    wE: Float64Array;
    wF: Float64Array;
    trainMse: number;
    valMse: number;
  }
  /** Gaussian activations of rows [r0, r1) into out (nSamples x K). */
  const activations = (g: Float64Array, r0: number, r1: number, out: Float64Array = new Float64Array(nSamples * K)): Float64Array => {
    gaussianActivations(g, d2.subarray(r0 * K, r1 * K), r1 - r0, K, out.subarray(r0 * K, r1 * K));
    return out;
  };
  // Candidate Gaussian shrinkages: the whole grid, or on a warm start the previous choice and
  // its grid neighbours (the choice rarely moves between refits an hour or a day apart).
  const grid = RIDGE_GRID.filter((v) => v > o.ridge).concat([o.ridge]).sort((a, c) => a - c);
  const prevRidge = warm?.gaussianRidge;
  const at = prevRidge === undefined ? -1 : grid.indexOf(prevRidge);
  // The largest candidate (practically the linear model) always stays in: without it a warm chain
  // that drifted to a small shrinkage can lose to plain ridge regression on a nearly linear series.
  const largest = grid[grid.length - 1];
  const near = at < 0 ? grid : grid.slice(Math.max(0, at - 1), at + 2);
  const searchGrid = near.includes(largest) ? near : [...near, largest];
  // A warm start begins from widths tuned by earlier fits: a few steps per refit keep tracking
  // them, so the alternation is spread over the chain of refits.
  // A warm start whose widths are resting after convergence keeps them (no width step this time).
  const resting = warm !== undefined && o.warmWidthRest > 0 && (warm.widthRest ?? 0) > 0;
  const widthIterations = resting ? 0 : warm ? Math.min(o.widthIterations, o.warmWidthIterations) : o.widthIterations;
  const evaluate = (g: Float64Array, e: Float64Array, searchRidge: boolean): State => {
    const ePr = products(e, K, true, fy, nFY);
    const gTrain = assemble(ePr.train, fProd.train);
    const gVal = ePr.val && fProd.val ? assemble(ePr.val, fProd.val) : null;
    let best: { w: Float64Array; val: number; r: number } | null = null;
    const candidates = searchRidge ? searchGrid : [gaussianRidge];
    for (const r of candidates) {
      const w = choleskySolve(factor(gTrain.g, r).factor, gTrain.b, H);
      const val = gVal ? quadMse(gVal, w, yyVal, nVal) : NaN;
      if (best === null || val < best.val) best = { w, val, r };
    }
    if (best === null) throw new Error('unreachable: no ridge candidate');
    gaussianRidge = best.r;
    const { wE, wF } = split(best.w);
    return { gammas: g, e, gTrain, gVal, w: best.w, wE, wF, trainMse: quadMse(gTrain, best.w, yyTrain, nTrain), valMse: best.val };
  };

  // Shrinkage of the Gaussian weights chosen on the validation tail (ridgeSearch); the largest
  // candidate is almost the linear model, so a nearly linear series is not made worse by Gaussians.
  let cur = evaluate(gammas, activations(gammas, 0, nSamples), nVal > 0 && o.ridgeSearch);
  const judge = (s: State): number => (nVal > 0 ? s.valMse : s.trainMse);
  const history: FitHistoryEntry[] = [{ iteration: 0, trainMse: cur.trainMse, validationMse: cur.valMse, accepted: true }];
  let step = FIRST_LOG_STEP;
  let spare: Float64Array = new Float64Array(nSamples * K);
  /** The alternation stopped because it converged (not because it ran out of iterations). */
  let converged = false;
  // Scratch of the width steps (training rows x H), allocated once per fit.
  const trainBlock = widthIterations > 0 ? nTrain * H : 0;
  const baseBuf = new Float64Array(trainBlock);
  const resBuf = new Float64Array(trainBlock);
  const peBuf = new Float64Array(trainBlock);

  for (let it = 1; it <= widthIterations; it++) {
    // Residuals of the current weights on the training rows: base = Y - F W_F, r = base - E W_E.
    // base = Y - F W_F (in place over the product), r = base - E W_E.
    const base = matmul(f.subarray(0, nTrain * nF), nTrain, nF, cur.wF, H, baseBuf);
    for (let i = 0; i < nTrain * H; i++) base[i] = yd[i] - base[i];
    const resTrain = matmul(cur.e.subarray(0, nTrain * K), nTrain, K, cur.wE, H, resBuf);
    for (let i = 0; i < nTrain * H; i++) resTrain[i] = base[i] - resTrain[i];
    const gk = logGammaGradient(resTrain, cur.e, d2, nTrain, K, cur.gammas, cur.wE, H);
    const grad = new Float64Array(K);
    if (o.widthMode === 'shared') {
      let s = 0;
      for (let k = 0; k < K; k++) s += gk[k];
      grad.fill(s);
    } else grad.set(gk);
    let gmax = 0;
    for (let k = 0; k < K; k++) gmax = Math.max(gmax, Math.abs(grad[k]));
    if (!(gmax > 0)) {
      converged = true;
      break;
    }
    const slope = o.widthMode === 'shared' ? grad[0] * grad[0] : grad.reduce((a, v) => a + v * v, 0);
    // f0 from the same residuals as the trials (not the normal-equation form), so the Armijo
    // test compares like with like.
    let f0 = 0;
    for (let i = 0; i < nTrain * H; i++) f0 += resTrain[i] * resTrain[i];
    f0 /= nTrain * H;
    // Backtracking on log γ with the weights fixed (Armijo condition on the training MSE):
    // each trial only needs new activations and E W_E.
    let t = step;
    let cand: Float64Array | null = null;
    for (let half = 0; half <= MAX_HALVINGS; half++) {
      const c = new Float64Array(K);
      for (let k = 0; k < K; k++) c[k] = cur.gammas[k] * Math.exp(-(t / gmax) * grad[k]);
      activations(c, 0, nTrain, spare);
      const pe = matmul(spare, nTrain, K, cur.wE, H, peBuf);
      let s = 0;
      for (let i = 0; i < nTrain * H; i++) {
        const v = base[i] - pe[i];
        s += v * v;
      }
      if (s / (nTrain * H) <= f0 - 1e-4 * (t / gmax) * slope) {
        cand = c;
        break;
      }
      t /= 2;
    }
    if (cand === null) {
      converged = true;
      break;
    }
    // Weights re-solved exactly for the new widths; the step stands only if validation improves.
    // The accepted trial left the training rows' activations in `spare`; add the tail's.
    const next = evaluate(cand, activations(cand, nTrain, nSamples, spare), false);
    const accepted = judge(next) <= judge(cur);
    history.push({ iteration: it, trainMse: next.trainMse, validationMse: next.valMse, accepted });
    if (!accepted) {
      converged = true;
      break;
    }
    const rel = judge(cur) > 0 ? (judge(cur) - judge(next)) / judge(cur) : 0;
    spare = cur.e;
    cur = next;
    step = Math.min(2 * t, 2 * FIRST_LOG_STEP);
    if (rel < o.widthTol) {
      converged = true;
      break;
    }
  }
  // Rest schedule of the widths for the next warm refits (see FitOptions.warmWidthRest).
  let widthRest = 0;
  let widthRestLength = 0;
  if (resting) {
    widthRest = (warm.widthRest ?? 1) - 1;
    widthRestLength = warm.widthRestLength ?? 1;
  } else if (converged && widthIterations > 0 && o.warmWidthRest > 0) {
    widthRestLength = Math.min(o.warmWidthRest, Math.max(1, 2 * (warm?.widthRestLength ?? 0)));
    widthRest = widthRestLength;
  }

  // Final weights for the chosen widths (all rows when refitAllRows), with one round of
  // iterative refinement: W += (G + Λ)^-1 (Phi^T (Y - Phi W) - Λ W).
  const allRows = nVal > 0 && o.refitAllRows;
  const finalRows = allRows ? nSamples : nTrain;
  const sys = allRows && cur.gVal ? { g: addArrays(cur.gTrain.g, cur.gVal.g), b: addArrays(cur.gTrain.b, cur.gVal.b) } : cur.gTrain;
  const fac = factor(sys.g, gaussianRidge);
  const w = choleskySolve(fac.factor, sys.b, H);
  for (let s = 0; s < (o.ridge < REFINE_BELOW_RIDGE ? FINAL_REFINE_STEPS : 0); s++) {
    const { wE, wF } = split(w);
    const { res } = residuals(cur.e, wE, wF, 0, finalRows);
    const eR = productRows(cur.e, K, res, H, 0, finalRows, false);
    const fR = productRows(f, nF, res, H, 0, finalRows, false);
    const rhs = new Float64Array(P * H);
    for (let k = 0; k < K; k++) rhs.set(eR.subarray(k * H, (k + 1) * H), (1 + k) * H);
    for (let j = 0; j < nF; j++) rhs.set(fR.subarray(j * H, (j + 1) * H), phiOfF(j) * H);
    for (let i = 0; i < P; i++) {
      const li = fac.lambda[i];
      if (li !== 0) for (let c = 0; c < H; c++) rhs[i * H + c] -= li * w[i * H + c];
    }
    const dw = choleskySolve(fac.factor, rhs, H);
    for (let i = 0; i < P * H; i++) w[i] += dw[i];
  }
  const finalMse = quadMse(sys, w, allRows ? yyTrain + yyVal : yyTrain, finalRows);

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
    gammas: Array.from(cur.gammas),
    weights,
    seed: o.seed,
    gaussianRidge,
  };
  if (widthRest > 0 || widthRestLength > 0) {
    model.widthRest = widthRest;
    model.widthRestLength = widthRestLength;
  }
  const report: FitReport = {
    kmeansPasses: km.passes,
    inertia: km.inertia,
    history,
    trainMse: finalMse,
    validationMse: cur.valMse,
    nTrainRows: nTrain,
    nValidationRows: nVal,
    warmStarted: warm !== undefined,
    gaussianRidge,
    ridgeRaised,
    widthsRested: resting,
  };
  return { model, report };
}

function addArrays(a: Float64Array, b: Float64Array): Float64Array {
  const out = new Float64Array(a.length);
  for (let i = 0; i < a.length; i++) out[i] = a[i] + b[i];
  return out;
}

function put(a: Float64Array, i: number, v: number, add: boolean): void {
  a[i] = add ? a[i] + v : v;
}

/** A^T [A | R] (p x (p + h), withSelf) or A^T R (p x h) over rows [r0, r1); A is n x p, R is n x h. */
function productRows(a: Float64Array, p: number, r: Float64Array, h: number, r0: number, r1: number, withSelf: boolean): Float64Array {
  return withSelf ? crossWithSelf(a, p, r, h, r0, r1) : crossRows(a, p, r, h, r0, r1);
}
