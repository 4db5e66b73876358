/**
 * Contracts of the numeric core (src/model). Pure data: no I/O, no clock, no logger.
 * All matrices are dense, row-major Float64Array with explicit dimensions.
 */

/** Dense row-major matrix: element (i, j) is data[i * cols + j]. */
export interface Dense {
  data: Float64Array;
  rows: number;
  cols: number;
}

/** How Gaussian widths are parameterised. */
export type WidthMode = 'shared' | 'per-centre';

export interface KMeansOptions {
  nCentres: number;
  /** Independent k-means++ restarts; the lowest within-cluster sum of squares wins. */
  restarts: number;
  /** Upper bound on Lloyd passes per restart. */
  maxPasses: number;
  /** Stop when the summed squared centre shift falls below tol * mean feature variance. */
  tol: number;
  /** Seed for the seeded random source (mulberry32). */
  seed: number;
  /** Warm start: initial centres (nCentres x nFeatures); restarts are skipped when given. */
  initialCentres?: Dense;
  /** Run Lloyd on a seeded subsample of this many rows, then assign every row (0 = off). */
  subsampleRows?: number;
  /** Record the within-cluster sum of squares after every pass in inertiaByPass (default false: it costs a distance per row and pass). */
  trackInertia?: boolean;
  /** Skip samples whose centre is proven unchanged by distance bounds (default true; false runs plain Lloyd, same result). */
  prune?: boolean;
}

export interface KMeansResult {
  centres: Dense;
  labels: Int32Array;
  /** Within-cluster sum of squared distances (inertia). */
  inertia: number;
  /** Lloyd passes of the winning restart. */
  passes: number;
  /** Squared distances of every sample to every centre (nSamples x nCentres). */
  dist2: Dense;
  /** Within-cluster sum of squares after each assignment step of the winning run (non-increasing); empty unless trackInertia. */
  inertiaByPass: number[];
}

export interface FitOptions {
  /** Number of Gaussian units (k-means centres). Default 32; must not exceed the number of samples. */
  nCentres: number;
  /** One width for all units, or one per unit. Default 'per-centre'. */
  widthMode: WidthMode;
  /**
   * Ridge penalty, relative (unit-free; 0 = plain least squares): Gaussian weights get
   * ridge * mean diagonal of the Gaussian block of Phi^T Phi, each linear weight ridge * its own
   * diagonal entry; the bias is not penalised.
   */
  ridge: number;
  /** Add linear terms of the inputs beside the Gaussian units. */
  linearTerms: boolean;
  /** Fit a bias (intercept) column. Default true; false only for pure interpolation networks (its weight row is then 0). */
  bias?: boolean;
  /** k-means++ restarts on a cold fit (lowest within-cluster sum of squares wins). Default 3. */
  restarts: number;
  /** Upper bound on Lloyd passes per restart. Default 100. */
  maxPasses: number;
  /** Maximum alternating (weights <-> widths) iterations on a cold fit. Default 5. */
  widthIterations: number;
  /** Stop the alternation when the relative validation improvement of a step is below this. Default 1e-3. */
  widthTol: number;
  /** Share of the (time-ordered) rows held back at the end as the validation tail, in [0, 0.9]. Default 0.2. */
  validationFraction: number;
  /** Seed of the random source (k-means++, subsample); same seed, same model. */
  seed: number;
  /** Previous model for a warm start (centres and widths reused when dimensions match). */
  warmStart?: RbfModel;
  /** Run k-means on a seeded subsample of this many rows, then assign every row (0 = off). */
  subsampleRows?: number;
  /** k-means shift tolerance (see KMeansOptions.tol). Default 1e-4. */
  kmeansTol?: number;
  /** Lloyd passes allowed when warm-started from a previous model's centres. Default 3. */
  warmMaxPasses?: number;
  /** Width iterations allowed on a warm start (its widths were tuned by earlier fits). Default 1. */
  warmWidthIterations?: number;
  /**
   * Longest rest of the widths on warm starts: after a fit whose alternation converged (its last
   * width step was rejected, failed the line search or improved by less than widthTol), that many
   * following warm refits keep the widths and skip the width step: 1 after the first convergence,
   * doubling with each further one up to this bound; an accepted, still-improving step ends the
   * rest. 0 = try a width step on every warm refit. Default 8.
   */
  warmWidthRest?: number;
  /** After choosing widths on the validation tail, solve the final weights on all rows. Default true. */
  refitAllRows?: boolean;
  /**
   * Choose a stronger shrinkage of the Gaussian weights (from ridge, 1e-4, 1e-2, 1, 100) on the
   * validation tail, so a nearly linear series falls back to its linear terms. Default true.
   */
  ridgeSearch?: boolean;
}

/** A fitted network as plain data; JSON round-trips give bit-identical predictions. */
export interface RbfModel {
  version: 1;
  nFeatures: number;
  nCentres: number;
  nOutputs: number;
  widthMode: WidthMode;
  linearTerms: boolean;
  /** nCentres x nFeatures, row-major. */
  centres: number[];
  /** One gamma per centre (all equal in shared mode). */
  gammas: number[];
  /** (1 + nCentres + (linearTerms ? nFeatures : 0)) x nOutputs, row-major: bias row, Gaussian rows, linear rows. */
  weights: number[];
  seed: number;
  /** Relative ridge of the Gaussian weights chosen by the fit (a warm start searches near it). */
  gaussianRidge?: number;
  /** Warm refits from this model that keep the widths without a width step (see FitOptions.warmWidthRest). */
  widthRest?: number;
  /** Length of the current rest (doubles while the alternation keeps converging). */
  widthRestLength?: number;
  /** Optional metadata set by callers (training span, feature scaling...). */
  meta?: Record<string, unknown>;
}

export interface FitHistoryEntry {
  iteration: number;
  trainMse: number;
  validationMse: number;
  accepted: boolean;
}

export interface FitReport {
  kmeansPasses: number;
  inertia: number;
  history: FitHistoryEntry[];
  /** MSE of the returned model on the rows its final weights were solved on (all rows when refitAllRows). */
  trainMse: number;
  /** Held-out MSE on the validation tail of the chosen widths (NaN without a tail). */
  validationMse: number;
  nTrainRows: number;
  nValidationRows: number;
  /** Centres and widths came from opts.warmStart. */
  warmStarted: boolean;
  /** Relative ridge used on the Gaussian weights (opts.ridge, or the one chosen by ridgeSearch). */
  gaussianRidge: number;
  /** The solve was singular at the asked ridge and the penalty was raised to make it definite. */
  ridgeRaised: boolean;
  /** A warm start kept the previous widths without a width step (they are resting after convergence). */
  widthsRested: boolean;
}

export interface Prediction {
  /** nSamples x nOutputs. */
  y: Dense;
  /** Per sample: the largest Gaussian activation max_k exp(-gamma_k |x - mu_k|^2), in [0, 1]; small = novel input (0 when it underflows). */
  novelty: Float64Array;
}
