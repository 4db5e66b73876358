/**
 * k-means by Lloyd's algorithm with k-means++ seeding (Arthur & Vassilvitskii, 2007), restarts
 * keeping the lowest within-cluster sum of squares, empty-cluster repair, warm start from given
 * centres and an optional seeded subsample. Deterministic for a given seed.
 */
import type { Dense, KMeansOptions, KMeansResult } from './types.ts';
import { ModelError } from './errors.ts';
import { checkDense, checkInt, checkNumber } from './check.ts';
import { mulberry32, randomIndex, type Random } from './random.ts';
import { dist2All, dist2Scalar, rowNorms2, simdKernels } from './distance.ts';

/** Result of one Lloyd run (internal). */
interface LloydRun {
  centres: Float64Array;
  labels: Int32Array;
  inertia: number;
  passes: number;
  inertiaByPass: number[];
}

export function kmeans(x: Dense, opts: KMeansOptions): KMeansResult {
  checkDense(x, 'x');
  const nSamples = x.rows;
  const nFeatures = x.cols;
  const nCentres = checkInt(opts.nCentres, 'opts.nCentres', 1);
  if (nCentres > nSamples) {
    throw new ModelError('TOO_FEW_SAMPLES', `nCentres=${nCentres} is larger than the ${nSamples} samples`, { where: 'opts.nCentres', value: nCentres, expected: `<= ${nSamples}` }, 'use fewer centres or a longer training window');
  }
  const restarts = checkInt(opts.restarts, 'opts.restarts', 1, 1000);
  const maxPasses = checkInt(opts.maxPasses, 'opts.maxPasses', 1);
  const tol = checkNumber(opts.tol, 'opts.tol', 0, Infinity);
  const seed = checkInt(opts.seed, 'opts.seed', -0x80000000, 0xffffffff) >>> 0;
  const subsampleRows = opts.subsampleRows === undefined ? 0 : checkInt(opts.subsampleRows, 'opts.subsampleRows', 0);
  if (opts.initialCentres !== undefined) {
    checkDense(opts.initialCentres, 'opts.initialCentres');
    if (opts.initialCentres.rows !== nCentres || opts.initialCentres.cols !== nFeatures) {
      throw new ModelError('DIMENSION_MISMATCH', `initial centres are ${opts.initialCentres.rows}x${opts.initialCentres.cols}, expected ${nCentres}x${nFeatures}`, { where: 'opts.initialCentres', value: `${opts.initialCentres.rows}x${opts.initialCentres.cols}`, expected: `${nCentres}x${nFeatures}` }, 'pass centres of the same number of centres and features, or none');
    }
  }
  const rnd = mulberry32(seed);

  // Lloyd runs on the subsample when one is asked for (and smaller than the data).
  let work = x.data;
  let nWork = nSamples;
  const sub = subsampleRows > 0 && subsampleRows < nSamples && subsampleRows >= nCentres;
  if (sub) {
    const idx = sampleIndices(rnd, nSamples, subsampleRows);
    work = new Float64Array(subsampleRows * nFeatures);
    for (let i = 0; i < subsampleRows; i++) work.set(x.data.subarray(idx[i] * nFeatures, (idx[i] + 1) * nFeatures), i * nFeatures);
    nWork = subsampleRows;
  }
  const x2 = rowNorms2(work, nWork, nFeatures);
  // Shift tolerance is relative to the data's spread: tol * mean feature variance.
  const tolAbs = tol * meanVariance(work, nWork, nFeatures);

  const pass = distancePass(work, x2, nWork, nFeatures);
  let best: LloydRun | null = null;
  if (opts.initialCentres !== undefined) {
    best = lloyd(work, x2, nWork, nFeatures, Float64Array.from(opts.initialCentres.data), nCentres, maxPasses, tolAbs, pass);
  } else {
    for (let r = 0; r < restarts; r++) {
      const c0 = seedPlusPlus(work, nWork, nFeatures, nCentres, rnd, pass);
      const run = lloyd(work, x2, nWork, nFeatures, c0, nCentres, maxPasses, tolAbs, pass);
      if (best === null || run.inertia < best.inertia) best = run;
    }
  }
  if (best === null) throw new Error('unreachable: no k-means run');

  // Distances of every row to the winning centres (the fit builds its Gaussians from them).
  let { labels, inertia } = best;
  const c2 = rowNorms2(best.centres, nCentres, nFeatures);
  let dist2: Float64Array;
  if (sub) {
    dist2 = dist2All(x.data, nSamples, nFeatures, best.centres, nCentres);
    labels = new Int32Array(nSamples);
    inertia = argminRows(dist2, nSamples, nCentres, labels, new Float64Array(nSamples));
  } else {
    dist2 = pass.all(best.centres, c2, nCentres, new Float64Array(nSamples * nCentres));
  }
  return {
    centres: { data: best.centres, rows: nCentres, cols: nFeatures },
    labels,
    inertia,
    passes: best.passes,
    dist2: { data: dist2, rows: nSamples, cols: nCentres },
    inertiaByPass: best.inertiaByPass,
  };
}

/** Partial Fisher-Yates: `m` distinct indices of [0, n), in ascending order (keeps time order). */
function sampleIndices(rnd: Random, n: number, m: number): Int32Array {
  const perm = new Int32Array(n);
  for (let i = 0; i < n; i++) perm[i] = i;
  for (let i = 0; i < m; i++) {
    const j = i + randomIndex(rnd, n - i);
    const t = perm[i];
    perm[i] = perm[j];
    perm[j] = t;
  }
  return perm.slice(0, m).sort();
}

function meanVariance(x: Float64Array, n: number, d: number): number {
  let total = 0;
  for (let j = 0; j < d; j++) {
    let mean = 0;
    for (let i = 0; i < n; i++) mean += x[i * d + j];
    mean /= n;
    let v = 0;
    for (let i = 0; i < n; i++) {
      const e = x[i * d + j] - mean;
      v += e * e;
    }
    total += v / n;
  }
  return total / d;
}

/** Distance passes over one data set: the SIMD kernels with the rows kept resident, or plain loops. */
interface DistancePass {
  /** Nearest centre of every row (labels, mind); returns the summed minimum. dist2 is filled on the scalar path only. */
  assign(c: Float64Array, c2: Float64Array, K: number, labels: Int32Array, mind: Float64Array, dist2: Float64Array | null): number;
  /** Full squared-distance matrix (n x K). */
  all(c: Float64Array, c2: Float64Array, K: number, out: Float64Array): Float64Array;
}

function distancePass(x: Float64Array, x2: Float64Array, n: number, d: number): DistancePass {
  const sk = simdKernels();
  if (sk) {
    const res = sk.resident(x, x2, n, d);
    return {
      assign: (c, c2, K, labels, mind) => res.assign(c, c2, K, labels, mind),
      all: (c, c2, K, out) => res.dist2(c, c2, K, out),
    };
  }
  return {
    assign(c, c2, K, labels, mind, dist2) {
      const dd = dist2 ?? new Float64Array(n * K);
      dist2Scalar(x, x2, n, d, c, c2, K, dd);
      return argminRows(dd, n, K, labels, mind);
    },
    all(c, c2, K, out) {
      dist2Scalar(x, x2, n, d, c, c2, K, out);
      return out;
    },
  };
}

/** labels[i] = argmin_k dist2[i,k] (first on ties), mind[i] its value; returns the summed minimum. */
function argminRows(dist2: Float64Array, n: number, K: number, labels: Int32Array, mind: Float64Array): number {
  let inertia = 0;
  for (let i = 0; i < n; i++) {
    const o = i * K;
    let bk = 0;
    let bv = dist2[o];
    for (let k = 1; k < K; k++) {
      const v = dist2[o + k];
      if (v < bv) {
        bv = v;
        bk = k;
      }
    }
    labels[i] = bk;
    mind[i] = bv;
    inertia += bv;
  }
  return inertia;
}

/** k-means++ seeding: first centre uniform, then each next sample with probability ∝ D(x)^2. */
function seedPlusPlus(x: Float64Array, n: number, d: number, K: number, rnd: Random, pass: DistancePass): Float64Array {
  const c = new Float64Array(K * d);
  const minD2 = new Float64Array(n);
  const dk = new Float64Array(n);
  const c2 = new Float64Array(1);
  let pick = randomIndex(rnd, n);
  for (let k = 0; k < K; k++) {
    if (k > 0) {
      let total = 0;
      for (let i = 0; i < n; i++) total += minD2[i];
      if (total > 0) {
        const target = rnd() * total;
        let cum = 0;
        pick = -1;
        for (let i = 0; i < n; i++) {
          cum += minD2[i];
          if (cum > target) {
            pick = i;
            break;
          }
        }
        if (pick < 0) for (let i = n - 1; i >= 0; i--) if (minD2[i] > 0) { pick = i; break; }
      } else {
        pick = randomIndex(rnd, n); // every sample already sits on a centre
      }
    }
    const centre = x.subarray(pick * d, (pick + 1) * d);
    c.set(centre, k * d);
    // Same summation order as the row norms, so the picked sample's own distance is exactly 0.
    rowNorms2(centre, 1, d, c2);
    pass.all(centre, c2, 1, dk);
    if (k === 0) minD2.set(dk);
    else for (let i = 0; i < n; i++) if (dk[i] < minD2[i]) minD2[i] = dk[i];
  }
  return c;
}

/**
 * Lloyd's algorithm from the given centres: assign, repair empty clusters, move centres to the
 * means; stop when no label changes, the squared centre shift is <= tolAbs, or after maxPasses.
 * Ends with an assignment to the final centres so labels and inertia agree with them.
 */
export function lloyd(x: Float64Array, x2: Float64Array, n: number, d: number, centres: Float64Array, K: number, maxPasses: number, tolAbs: number, pass = distancePass(x, x2, n, d)): LloydRun {
  const scalarDist = simdKernels() ? null : new Float64Array(n * K);
  const labels = new Int32Array(n).fill(-1);
  const next = new Int32Array(n);
  const mind = new Float64Array(n);
  const counts = new Int32Array(K);
  const sums = new Float64Array(K * d);
  const c2 = new Float64Array(K);
  const inertiaByPass: number[] = [];
  let passes = 0;
  let inertia = 0;
  let settled = false;
  while (passes < maxPasses) {
    rowNorms2(centres, K, d, c2);
    inertia = pass.assign(centres, c2, K, next, mind, scalarDist);
    passes++;
    inertiaByPass.push(inertia);
    let changed = 0;
    for (let i = 0; i < n; i++) if (next[i] !== labels[i]) changed++;
    labels.set(next);
    if (passes > 1 && changed === 0) {
      settled = true;
      break;
    }
    inertia -= repairEmpty(x, n, d, mind, K, labels, centres);
    // Centre update: c_k = mean of its members.
    counts.fill(0);
    sums.fill(0);
    for (let i = 0; i < n; i++) {
      const k = labels[i];
      counts[k]++;
      const so = k * d;
      const xo = i * d;
      for (let j = 0; j < d; j++) sums[so + j] += x[xo + j];
    }
    let shift = 0;
    for (let k = 0; k < K; k++) {
      const cnt = counts[k];
      if (cnt === 0) continue;
      const o = k * d;
      for (let j = 0; j < d; j++) {
        const v = sums[o + j] / cnt;
        const e = v - centres[o + j];
        shift += e * e;
        centres[o + j] = v;
      }
    }
    if (shift <= tolAbs) break;
  }
  if (!settled) {
    rowNorms2(centres, K, d, c2);
    inertia = pass.assign(centres, c2, K, labels, mind, scalarDist);
    passes++;
    inertiaByPass.push(inertia);
  }
  return { centres, labels, inertia, passes, inertiaByPass };
}

/**
 * Empty clusters take the sample farthest from its own centre (which then forms a singleton);
 * returns the decrease of the objective so the caller's inertia stays exact.
 */
function repairEmpty(x: Float64Array, n: number, d: number, mind: Float64Array, K: number, labels: Int32Array, centres: Float64Array): number {
  const counts = new Int32Array(K);
  for (let i = 0; i < n; i++) counts[labels[i]]++;
  let gain = 0;
  for (let k = 0; k < K; k++) {
    if (counts[k] > 0) continue;
    let far = -1;
    let farV = -1;
    for (let i = 0; i < n; i++) {
      if (counts[labels[i]] <= 1) continue; // never empty another cluster
      const v = mind[i];
      if (v > farV) {
        farV = v;
        far = i;
      }
    }
    if (far < 0) break;
    counts[labels[far]]--;
    labels[far] = k;
    counts[k] = 1;
    gain += farV;
    mind[far] = 0;
    for (let j = 0; j < d; j++) centres[k * d + j] = x[far * d + j];
  }
  return gain;
}
