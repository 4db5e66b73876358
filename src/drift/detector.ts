/**
 * The change detector on the stream of scaled forecast errors.
 *
 * Observation: one per matured target step T, the mean over the leads that matured at T of the
 * error ratio r = scaledError / baselineMase(lead), so r has mean 1 while the model performs as
 * its backtest did, whatever the series' units.
 *
 * Statistic: a one-sided CUSUM (Page, E. S. 1954, "Continuous inspection schemes", Biometrika
 * 41(1/2), 100-115), written per step so that one batch of `b` steps adds the standardised batch
 * mean:
 *     S_T = min(cap, max(0, S_{T-1} + (z_T - k) / b)),   z_T = (min(r_T, clip) - 1) / spread
 * It is the same number as the Page–Hinkley form m_T - min_{t<=T} m_t of the cumulative sum
 * m_T = sum (z_t - k) / b with the reference level fixed at the backtest's (Hinkley, D. V. 1971,
 * "Inference about the change-point from cumulative sum tests", Biometrika 58(3), 509-523).
 *
 * Why batch units: forecast errors are serially correlated (neighbouring targets share most of
 * their origins and weather), so a per-step CUSUM tuned as for independent data alarms far too
 * often. Scaling by the spread of batch means (non-overlapping means of b steps, the
 * "batch means" treatment of autocorrelated data in statistical process control, e.g. Runger &
 * Willemain 1996, IIE Transactions 28; cited from memory) makes k and h mean roughly what they
 * mean for independent normal data with one observation per batch.
 *
 * Spread: estimated online from completed batches while the detector is in control (state ok,
 * statistic below watch), as the root mean square of (batch mean - 1), winsorised at 4 spreads,
 * starting from a prior worth SPREAD_PRIOR_BATCHES batches and fading with a memory of
 * SPREAD_MEMORY_BATCHES batches.
 *
 * Recovery: while in watch or alert a second CUSUM, on completed batches only, collects evidence
 * that errors are back at or below the reference level:  R_j = max(0, R_{j-1} + k - zB_j) with
 * zB_j = (B_j - 1) / spread for batch mean B_j. When R reaches the recovery threshold (and the
 * minimum dwell has passed), the state returns to ok and both statistics restart at 0. Without it
 * the upward statistic would drain by only k per batch and a recovered series would stay in alert
 * for days; per step instead of per batch it would be fooled by a few calm hours inside a drift.
 */
import {
  SPREAD_FLOOR,
  SPREAD_MEMORY_BATCHES,
  STATISTIC_CAP_FACTOR,
  type DriftSettings,
} from './settings.ts';

/** Error-driven level (stale and novelty are handled in assess.ts). */
export type ErrorLevel = 'ok' | 'watch' | 'alert';
export const LEVEL_RANK: Record<ErrorLevel, number> = { ok: 0, watch: 1, alert: 2 };

/** Serialisable detector state. */
export interface DetectorState {
  /** Upward CUSUM S, spread units. */
  statistic: number;
  /** Recovery CUSUM R, spread units (0 while ok). */
  recovery: number;
  level: ErrorLevel;
  /** Matured steps since the level was entered. */
  stepsInLevel: number;
  /** Consecutive steps the statistic has pointed above the current level. */
  raiseRun: number;
  /** Lowest level pointed to during that run (the level the state rises to). */
  raiseRunLevel: ErrorLevel;
  /** Spread estimate as a variance, and its effective weight in batches. */
  spreadVar: number;
  spreadWeight: number;
  /** Current partial batch: sum of ratios and number of steps. */
  batchSum: number;
  batchCount: number;
  /** Observations processed so far. */
  observed: number;
}

export function initialDetector(settings: DriftSettings, priorWeight: number): DetectorState {
  return {
    statistic: 0,
    recovery: 0,
    level: 'ok',
    stepsInLevel: 0,
    raiseRun: 0,
    raiseRunLevel: 'ok',
    spreadVar: settings.spreadPrior * settings.spreadPrior,
    spreadWeight: priorWeight,
    batchSum: 0,
    batchCount: 0,
    observed: 0,
  };
}

export function spreadOf(d: DetectorState): number {
  return Math.max(SPREAD_FLOOR, Math.sqrt(d.spreadVar));
}

/** Level the statistic points to, with the thresholds of the settings. */
export function levelOf(statistic: number, s: DriftSettings): ErrorLevel {
  if (statistic >= s.alertThreshold) return 'alert';
  if (statistic >= s.watchThreshold) return 'watch';
  return 'ok';
}

/** Page's one-sided CUSUM step in batch units: S_T = min(cap, max(0, S_{T-1} + (z - k) / b)). */
export function cusumUpdate(prev: number, z: number, k: number, b: number, cap: number): number {
  return Math.min(cap, Math.max(0, prev + (z - k) / b));
}

/** What one step did, for the caller's bookkeeping. */
export interface StepOutcome {
  raisedTo?: ErrorLevel;
  recovered?: boolean;
}

/**
 * Feed one observation (the mean error ratio of one matured target step). Mutates `d` in place
 * (the caller owns a copy) and returns what changed.
 */
export function detectorStep(d: DetectorState, ratio: number, s: DriftSettings): StepOutcome {
  const out: StepOutcome = {};
  const b = s.batchSteps;
  const spread = spreadOf(d);
  // z_T = (min(r, clip) - 1) / spread  (the clip keeps one wild step from deciding anything alone)
  const z = (Math.min(ratio, s.clipRatio) - 1) / spread;
  d.statistic = cusumUpdate(d.statistic, z, s.allowance, b, STATISTIC_CAP_FACTOR * s.alertThreshold);
  d.observed++;
  d.stepsInLevel++;

  const pointed = levelOf(d.statistic, s);
  if (LEVEL_RANK[pointed] > LEVEL_RANK[d.level]) {
    d.raiseRunLevel = d.raiseRun === 0 || LEVEL_RANK[pointed] < LEVEL_RANK[d.raiseRunLevel] ? pointed : d.raiseRunLevel;
    d.raiseRun++;
    if (d.raiseRun >= s.raiseAfterSteps) {
      d.level = d.raiseRunLevel;
      d.stepsInLevel = 0;
      d.raiseRun = 0;
      d.raiseRunLevel = 'ok';
      d.recovery = 0;
      out.raisedTo = d.level;
    }
  } else {
    d.raiseRun = 0;
    d.raiseRunLevel = 'ok';
  }

  d.batchSum += Math.min(ratio, s.clipRatio);
  d.batchCount++;
  if (d.batchCount < b) return out;
  // A batch is complete: its mean feeds the spread estimate (in control) or the recovery CUSUM.
  const mean = d.batchSum / d.batchCount;
  d.batchSum = 0;
  d.batchCount = 0;
  if (d.level === 'ok') {
    if (d.statistic < s.watchThreshold) {
      // spread^2 <- spread^2 + ((B - 1)^2 - spread^2) / w, deviation winsorised at 4 spreads
      const dev = Math.min(Math.abs(mean - 1), 4 * spread);
      const w = Math.min(d.spreadWeight + 1, SPREAD_MEMORY_BATCHES);
      d.spreadVar += (dev * dev - d.spreadVar) / w;
      d.spreadWeight = w;
    }
    return out;
  }
  if (out.raisedTo) return out;
  // R_j = max(0, R_{j-1} + k - zB_j), zB_j = (B_j - 1) / spread: evidence that errors are back under the reference
  d.recovery = Math.max(0, d.recovery + s.allowance - (mean - 1) / spread);
  if (d.recovery >= s.recoveryThreshold && d.stepsInLevel >= s.dwellSteps) {
    d.level = 'ok';
    d.stepsInLevel = 0;
    d.statistic = 0;
    d.recovery = 0;
    d.raiseRun = 0;
    d.raiseRunLevel = 'ok';
    out.recovered = true;
  }
  return out;
}
