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
import type { LloydState, LloydWork } from './wasm/kernels.ts';

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
  return kmeansChecked(x, opts);
}

/** kmeans() for an x the caller has already passed through checkDense (the fit does). */
export function kmeansChecked(x: Dense, opts: KMeansOptions): KMeansResult {
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
  const pass = distancePass(work, x2, nWork, nFeatures);
  // Shift tolerance is relative to the data's spread: tol * mean feature variance.
  const tolAbs = tol * pass.meanVariance();
  const how: LloydOptions = { trackInertia: opts.trackInertia === true, prune: opts.prune !== false };
  let best: LloydRun | null = null;
  if (opts.initialCentres !== undefined) {
    best = lloyd(work, x2, nWork, nFeatures, Float64Array.from(opts.initialCentres.data), nCentres, maxPasses, tolAbs, pass, how);
  } else {
    for (let r = 0; r < restarts; r++) {
      const c0 = seedPlusPlus(work, nWork, nFeatures, nCentres, rnd, pass);
      const run = lloyd(work, x2, nWork, nFeatures, c0, nCentres, maxPasses, tolAbs, pass, how);
      if (best === null || run.inertia < best.inertia) best = run;
    }
  }
  if (best === null) throw new Error('unreachable: no k-means run');

  // Distances of every row to the winning centres (the fit builds its Gaussians from them).
  let { labels, inertia } = best;
  let dist2: Float64Array;
  if (sub) {
    dist2 = dist2All(x.data, nSamples, nFeatures, best.centres, nCentres);
    labels = new Int32Array(nSamples);
    inertia = argminRows(dist2, nSamples, nCentres, labels, new Float64Array(nSamples));
  } else {
    dist2 = pass.all(best.centres, rowNorms2(best.centres, nCentres, nFeatures), nCentres, new Float64Array(nSamples * nCentres));
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
  /** Full squared-distance matrix (n x K). */
  all(c: Float64Array, c2: Float64Array, K: number, out: Float64Array): Float64Array;
  /** k-means++ step (see SimdKernels.seedUpdate); minD2 is valid until the next call. */
  seed(centre: Float64Array, first: boolean): { total: number; minD2: Float64Array };
  /** State and assignment passes of a Lloyd run with K centres. */
  lloyd(K: number): LloydWork;
  /** Mean over the features of each feature's variance. */
  meanVariance(): number;
}

/** Nearest centre, its squared distance and the second smallest one, per listed row. */
interface Assignment {
  labels: Int32Array;
  best: Float64Array;
  second: Float64Array;
}

function distancePass(x: Float64Array, x2: Float64Array, n: number, d: number): DistancePass {
  const sk = simdKernels();
  if (sk) {
    const res = sk.resident(x, x2, n, d);
    return {
      all: (c, c2, K, out) => res.dist2(c, c2, K, out),
      seed: (centre, first) => res.seedUpdate(centre, first),
      lloyd: (K) => res.lloydWork(K),
      meanVariance: () => res.meanVariance(),
    };
  }
  const minD2 = new Float64Array(n);
  return {
    all(c, c2, K, out) {
      dist2Scalar(x, x2, n, d, c, c2, K, out);
      return out;
    },
    seed(centre, first) {
      let total = 0;
      for (let i = 0; i < n; i++) {
        let s = 0;
        const o = i * d;
        for (let j = 0; j < d; j++) {
          const e = x[o + j] - centre[j];
          s += e * e;
        }
        if (first || s < minD2[i]) minD2[i] = s;
        total += minD2[i];
      }
      return { total, minD2 };
    },
    lloyd: (K) => scalarLloydWork(x, x2, n, d, K),
    meanVariance: () => meanVariance(x, n, d),
  };
}

/** LloydWork on plain arrays with scalar loops: the same steps and tests as the module's lloydPass. */
function scalarLloydWork(x: Float64Array, x2: Float64Array, n: number, d: number, K: number): LloydWork {
  const st: LloydState = { labels: new Int32Array(n), own: new Float64Array(n), upper: new Float64Array(n), lower: new Float64Array(n), sums: new Float64Array(K * d), counts: new Int32Array(K) };
  const half = new Float64Array(K);
  const check = new Int32Array(n);
  const todo = new Int32Array(n);
  const checked = new Float64Array(n);
  const found: Assignment = { labels: new Int32Array(n), best: new Float64Array(n), second: new Float64Array(n) };
  const dist = new Float64Array(n * K);
  return {
    views: () => st,
    reset() {
      st.labels.fill(-1);
      st.sums.fill(0);
      st.counts.fill(0);
    },
    pass(c, c2, moved, mode, m1, m2, mk, slack0, slackUnit) {
      let rows: Int32Array | null = null;
      let count = n;
      if (mode === 1) {
        centreGaps(c, K, d, half);
        const nCheck = boundScan(n, st.labels, st.lower, st.upper, x2, half, moved, m1, m2, mk, slack0, slackUnit, check);
        ownDistances(x, d, c, st.labels, checked, check, nCheck);
        count = boundFilter(nCheck, check, checked, st.labels, st.lower, st.upper, st.own, x2, half, slack0, slackUnit, todo);
        rows = todo;
      } else if (mode === 2) shrinkAll(n, st.labels, st.lower, st.upper, moved, m1, m2, mk);
      if (count === 0) return 0;
      if (rows) {
        // Distance rows of the listed samples only (gathered, then the scalar kernel).
        const g = new Float64Array(count * d);
        const g2 = new Float64Array(count);
        for (let t = 0; t < count; t++) {
          g.set(x.subarray(rows[t] * d, (rows[t] + 1) * d), t * d);
          g2[t] = x2[rows[t]];
        }
        dist2Scalar(g, g2, count, d, c, c2, K, dist);
      } else dist2Scalar(x, x2, n, d, c, c2, K, dist);
      argmin2Rows(dist, count, K, found);
      return applyAssignment(found, rows, count, x, d, st);
    },
    exactOwn(c) {
      ownDistances(x, d, c, st.labels, st.own, null, n);
      for (let i = 0; i < n; i++) st.upper[i] = Math.sqrt(st.own[i]);
    },
  };
}

/** out[t] = |x_i - c_labels[i]|^2 (difference form) for i = rows[t] (or t when rows is null), t < count. */
function ownDistances(x: Float64Array, d: number, c: Float64Array, labels: Int32Array, out: Float64Array, rows: Int32Array | null, count: number): void {
  for (let t = 0; t < count; t++) {
    const i = rows ? rows[t] : t;
    let s = 0;
    const xo = i * d;
    const co = labels[i] * d;
    for (let j = 0; j < d; j++) {
      const e = x[xo + j] - c[co + j];
      s += e * e;
    }
    out[t] = s;
  }
}

/** half[k] = half the distance from centre k to the nearest other centre (Infinity for one centre). */
function centreGaps(c: Float64Array, K: number, d: number, half: Float64Array): void {
  half.fill(Infinity);
  for (let k = 0; k < K; k++) {
    for (let k2 = k + 1; k2 < K; k2++) {
      let s = 0;
      for (let j = 0; j < d; j++) {
        const e = c[k * d + j] - c[k2 * d + j];
        s += e * e;
      }
      const h = 0.5 * Math.sqrt(s);
      if (h < half[k]) half[k] = h;
      if (h < half[k2]) half[k2] = h;
    }
  }
}

/** Takes the nearest centres found for rows[0..count) (all when null) into the state; returns how many labels changed. */
function applyAssignment(found: Assignment, rows: Int32Array | null, count: number, x: Float64Array, d: number, st: LloydState): number {
  const { labels: to, best, second } = found;
  let changed = 0;
  for (let t = 0; t < count; t++) {
    const i = rows ? rows[t] : t;
    const bk = to[t];
    const old = st.labels[i];
    if (old !== bk) {
      changed++;
      moveSample(x, d, st, i, old, bk);
    }
    st.own[i] = best[t];
    st.upper[i] = Math.sqrt(best[t]);
    st.lower[i] = Math.sqrt(second[t]);
  }
  return changed;
}

/**
 * Moves sample i from cluster `from` (-1: none) to `to`, keeping the member sums and counts
 * current, so the centre update costs K x d instead of n x d.
 */
function moveSample(x: Float64Array, d: number, st: LloydState, i: number, from: number, to: number): void {
  const { sums, counts } = st;
  const xo = i * d;
  if (from >= 0) {
    counts[from]--;
    const so = from * d;
    for (let j = 0; j < d; j++) sums[so + j] -= x[xo + j];
  }
  counts[to]++;
  const so = to * d;
  for (let j = 0; j < d; j++) sums[so + j] += x[xo + j];
  st.labels[i] = to;
}

/** Per row of dist (count x K): first smallest value, its column, and the second smallest value. */
function argmin2Rows(dist: Float64Array, count: number, K: number, out: Assignment): void {
  for (let t = 0; t < count; t++) {
    const o = t * K;
    let bk = 0;
    let b1 = dist[o];
    let b2 = Infinity;
    for (let k = 1; k < K; k++) {
      const v = dist[o + k];
      if (v < b1) {
        b2 = b1;
        b1 = v;
        bk = k;
      } else if (v < b2) b2 = v;
    }
    out.labels[t] = bk;
    out.best[t] = b1;
    out.second[t] = b2;
  }
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
  let pick = randomIndex(rnd, n);
  let state: { total: number; minD2: Float64Array } = { total: 0, minD2: new Float64Array(0) };
  for (let k = 0; k < K; k++) {
    if (k > 0) {
      const { total, minD2 } = state;
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
    // Difference form: the picked sample's own distance is exactly 0, so it is never re-picked.
    state = pass.seed(centre, k === 0);
  }
  return c;
}

/** How a Lloyd run is carried out (results are the same either way). */
export interface LloydOptions {
  /** Record the exact within-cluster sum of squares after every assignment (costs a distance per row and pass). */
  trackInertia?: boolean;
  /** Skip rows whose centre is proven unchanged (default true; false runs plain Lloyd, for comparisons). */
  prune?: boolean;
}

/**
 * Lloyd's algorithm from the given centres: assign, repair empty clusters, move centres to the
 * means; stop when no label changes, the squared centre shift is <= tolAbs, or after maxPasses.
 * Ends with an assignment to the final centres so labels and inertia agree with them.
 *
 * Assignments after the first skip a sample when Hamerly's bounds (Hamerly 2010, "Making k-means
 * even faster") prove its centre is still the nearest. Per sample it keeps an upper bound u on
 * the distance to its own centre (grown by that centre's move) and a lower bound l on the
 * distance to the second nearest (shrunk by the largest move of another centre). A sample is
 * skipped when u, or else its exact distance, lies below z = max(l, half the distance from its
 * centre to the nearest other centre). The full pass ranks centres by |x|^2 + |c|^2 - 2 x.c,
 * whose rounding error is absolute, at most about (d + 2) eps (|x|^2 + |c|^2); so the test is
 * u^2 + slack < z^2 (1 - 2e-9) with slack = 8 (d + 2) eps (|x|^2 + max |c|^2), a relative
 * margin for the rounding of the bounds themselves. Every skipped sample then keeps its label in
 * the full pass too, and the result equals plain Lloyd bit for bit (tested against prune: false).
 */
export function lloyd(x: Float64Array, x2: Float64Array, n: number, d: number, centres: Float64Array, K: number, maxPasses: number, tolAbs: number, pass = distancePass(x, x2, n, d), opts: LloydOptions = {}): LloydRun {
  const track = opts.trackInertia === true;
  const prune = opts.prune !== false;
  const work = pass.lloyd(K);
  work.reset();
  const c2 = new Float64Array(K);
  const before = new Float64Array(K * d);
  const moved = new Float64Array(K);
  const inertiaByPass: number[] = [];
  /** Rounding slack of the expanded distance form, per unit of |x|^2 + max |c|^2. */
  const slackUnit = 8 * (d + 2) * 2 ** -52;
  let passes = 0;
  let settled = false;
  let changed = 0;

  const sumOwn = (): number => {
    const { own } = work.views();
    let s = 0;
    for (let i = 0; i < n; i++) s += own[i];
    return s;
  };

  /** One assignment pass: every row the first time, after that the rows the bounds do not settle. */
  const assign = (): void => {
    rowNorms2(centres, K, d, c2);
    if (passes === 0) {
      changed = work.pass(centres, c2, moved, 0, 0, 0, -1, 0, 0);
      return;
    }
    // Largest and second largest centre move (the lower bounds shrink by them).
    let m1 = 0;
    let m2 = 0;
    let mk = -1;
    let c2max = 0;
    for (let k = 0; k < K; k++) {
      const v = moved[k];
      if (v > m1) {
        m2 = m1;
        m1 = v;
        mk = k;
      } else if (v > m2) m2 = v;
      c2max = Math.max(c2max, c2[k]);
    }
    changed = work.pass(centres, c2, moved, prune ? 1 : 2, m1, m2, mk, slackUnit * c2max, slackUnit);
  };

  while (passes < maxPasses) {
    assign();
    passes++;
    if (track) {
      work.exactOwn(centres);
      inertiaByPass.push(sumOwn());
    }
    if (passes > 1 && changed === 0) {
      settled = true;
      break;
    }
    before.set(centres);
    let { counts } = work.views();
    let empty = false;
    for (let k = 0; k < K; k++) if (counts[k] === 0) empty = true;
    if (empty) {
      work.exactOwn(centres); // the farthest sample by exact distances, whatever the bounds skipped
      repairEmpty(n, d, K, x, centres, work.views());
      counts = work.views().counts;
    }
    // Centre update: c_k = mean of its members (sums kept current by the passes).
    const { sums } = work.views();
    for (let k = 0; k < K; k++) {
      const cnt = counts[k];
      if (cnt === 0) continue;
      const o = k * d;
      for (let j = 0; j < d; j++) centres[o + j] = sums[o + j] / cnt;
    }
    let shift = 0;
    for (let k = 0; k < K; k++) {
      let s = 0;
      for (let j = 0; j < d; j++) {
        const e = centres[k * d + j] - before[k * d + j];
        s += e * e;
      }
      moved[k] = Math.sqrt(s);
      shift += s;
    }
    if (shift <= tolAbs) break;
  }
  if (!settled) {
    assign();
    passes++;
    if (track) {
      work.exactOwn(centres);
      inertiaByPass.push(sumOwn());
    }
  }
  if (!track) work.exactOwn(centres);
  const inertia = track ? inertiaByPass[inertiaByPass.length - 1] : sumOwn();
  return { centres, labels: Int32Array.from(work.views().labels), inertia, passes, inertiaByPass };
}

/**
 * First bound test of a pruned pass: shrinks each lower bound by the largest move of another
 * centre, grows each upper bound by its own centre's move, and lists the samples where
 * u^2 + slack < z^2 (1 - 2e-9), z = max(l, half[a]), does not hold (slack = slack0 + slackUnit |x|^2).
 * Returns how many were listed. (Top-level with typed-array parameters: stays optimised.)
 */
function boundScan(n: number, labels: Int32Array, lower: Float64Array, upper: Float64Array, x2: Float64Array, half: Float64Array, moved: Float64Array, m1: number, m2: number, mk: number, slack0: number, slackUnit: number, check: Int32Array): number {
  let nCheck = 0;
  for (let i = 0; i < n; i++) {
    const a = labels[i];
    const l = lower[i] - (a === mk ? m2 : m1);
    lower[i] = l;
    const u = upper[i] + moved[a];
    upper[i] = u;
    const h = half[a];
    const z = l > h ? l : h;
    if (u * u + slack0 + slackUnit * x2[i] >= z * z * (1 - 2e-9)) check[nCheck++] = i;
  }
  return nCheck;
}

/** The bound updates of boundScan without the test (plain Lloyd assigns every sample). */
function shrinkAll(n: number, labels: Int32Array, lower: Float64Array, upper: Float64Array, moved: Float64Array, m1: number, m2: number, mk: number): void {
  for (let i = 0; i < n; i++) {
    const a = labels[i];
    lower[i] -= a === mk ? m2 : m1;
    upper[i] += moved[a];
  }
}

/**
 * Second bound test, with the exact squared distances `checked` of the listed samples: stores
 * them (own, upper) and lists in todo the samples still not proven to keep their centre.
 */
function boundFilter(nCheck: number, check: Int32Array, checked: Float64Array, labels: Int32Array, lower: Float64Array, upper: Float64Array, own: Float64Array, x2: Float64Array, half: Float64Array, slack0: number, slackUnit: number, todo: Int32Array): number {
  let count = 0;
  for (let t = 0; t < nCheck; t++) {
    const i = check[t];
    const s = checked[t];
    own[i] = s;
    upper[i] = Math.sqrt(s);
    const l = lower[i];
    const h = half[labels[i]];
    const z = l > h ? l : h;
    if (s + slack0 + slackUnit * x2[i] >= z * z * (1 - 2e-9)) todo[count++] = i;
  }
  return count;
}

/**
 * Empty clusters take the sample farthest from its own centre (which then forms a singleton);
 * `own` holds each sample's squared distance to its centre.
 */
function repairEmpty(n: number, d: number, K: number, x: Float64Array, centres: Float64Array, st: LloydState): void {
  const { own, labels, counts, upper, lower } = st;
  for (let k = 0; k < K; k++) {
    if (counts[k] > 0) continue;
    let far = -1;
    let farV = -1;
    for (let i = 0; i < n; i++) {
      if (counts[labels[i]] <= 1) continue; // never empty another cluster
      if (own[i] > farV) {
        farV = own[i];
        far = i;
      }
    }
    if (far < 0) break;
    moveSample(x, d, st, far, labels[far], k);
    own[far] = 0;
    upper[far] = 0;
    lower[far] = 0; // its old centre may now be the nearest other one: recompute next pass
    for (let j = 0; j < d; j++) centres[k * d + j] = x[far * d + j];
  }
}
