/**
 * Parameters of the drift layer, resolved to plain numbers (steps, ms, ratios). The config schema
 * (src/config/schema.ts) is where users set them; its defaults are taken from DRIFT_DEFAULTS so
 * there is one copy. Meaning of the detector units: see detector.ts.
 */

export interface NoveltySettings {
  /** An input is novel when its largest Gaussian activation max_k exp(-gamma_k |x - mu_k|^2) is below this. */
  activation: number;
  /** Share of novel inputs in the window that raises `watch` (cleared below half of it). */
  share: number;
  /** Window the share is taken over, in series steps (inputs issued within windowSteps * stepMs before now). */
  windowSteps: number;
}

export interface DriftSettings {
  /**
   * CUSUM reference allowance k, in spread units (standard deviations of a batch mean of the
   * error ratio). Excess error below k is not accumulated; the detector is most sensitive to a
   * rise of about 2k.
   */
  allowance: number;
  /** Statistic (spread units) at or above which the state rises to `watch`. */
  watchThreshold: number;
  /** Statistic (spread units) at or above which the state rises to `alert` (the CUSUM decision interval h). */
  alertThreshold: number;
  /** Evidence (spread units) of the recovery CUSUM needed to return from watch/alert to ok. */
  recoveryThreshold: number;
  /** Matured target steps per batch: the time scale of the statistic and of the spread estimate. */
  batchSteps: number;
  /** Assumed spread (sd of a batch mean of the error ratio) until enough in-control batches were seen. */
  spreadPrior: number;
  /** A single matured step counts as at most this many times the baseline error (spike clip). */
  clipRatio: number;
  /** Matured steps the statistic must stay at or above a threshold before the state rises. */
  raiseAfterSteps: number;
  /** Minimum matured steps in watch/alert before the state may return to ok. */
  dwellSteps: number;
  novelty: NoveltySettings;
  /** No reading for longer than this (ms) gives `stale`. */
  staleAfterMs: number;
  /** While in `alert`, announce it again at this interval (ms); 0 = only on transitions. */
  repeatAlertMs: number;
}

/** The one copy of the defaults (hourly series: batch and dwell are one day). */
export const DRIFT_DEFAULTS: Readonly<DriftSettings> = Object.freeze({
  allowance: 1,
  watchThreshold: 5,
  alertThreshold: 10,
  recoveryThreshold: 2,
  batchSteps: 24,
  spreadPrior: 0.35,
  clipRatio: 5,
  raiseAfterSteps: 3,
  dwellSteps: 24,
  novelty: Object.freeze({ activation: 0.05, share: 0.3, windowSteps: 24 }),
  staleAfterMs: 3 * 3_600_000,
  repeatAlertMs: 6 * 3_600_000,
});

/** Inputs below this many in the novelty window never raise `watch` (one odd input is not a pattern). */
export const NOVELTY_MIN_INPUTS = 3;
/** Weight of the spread prior, in batches. */
export const SPREAD_PRIOR_BATCHES = 7;
/** Memory of the spread estimate, in batches (older batches fade out exponentially). */
export const SPREAD_MEMORY_BATCHES = 60;
/** Floor of the spread (a near-perfect model must not turn every wobble into a change). */
export const SPREAD_FLOOR = 0.05;
/** The statistic is kept at or below this multiple of alertThreshold. */
export const STATISTIC_CAP_FACTOR = 2;

export interface SettingsProblem {
  key: string;
  message: string;
}

/** Check a settings object (e.g. one built by hand or by a test); the config schema does the same for users. */
export function checkDriftSettings(s: DriftSettings): SettingsProblem[] {
  const out: SettingsProblem[] = [];
  const pos = (key: string, v: number) => {
    if (!(Number.isFinite(v) && v > 0)) out.push({ key, message: `must be a positive number, got ${v}` });
  };
  const nonneg = (key: string, v: number) => {
    if (!(Number.isFinite(v) && v >= 0)) out.push({ key, message: `must be zero or more, got ${v}` });
  };
  const int = (key: string, v: number, min: number) => {
    if (!(Number.isInteger(v) && v >= min)) out.push({ key, message: `must be an integer >= ${min}, got ${v}` });
  };
  nonneg('allowance', s.allowance);
  pos('watchThreshold', s.watchThreshold);
  pos('alertThreshold', s.alertThreshold);
  if (s.watchThreshold >= s.alertThreshold) out.push({ key: 'watchThreshold', message: 'must be below alertThreshold' });
  pos('recoveryThreshold', s.recoveryThreshold);
  int('batchSteps', s.batchSteps, 1);
  pos('spreadPrior', s.spreadPrior);
  if (!(s.clipRatio > 1)) out.push({ key: 'clipRatio', message: `must be above 1, got ${s.clipRatio}` });
  int('raiseAfterSteps', s.raiseAfterSteps, 1);
  int('dwellSteps', s.dwellSteps, 0);
  if (!(s.novelty.activation > 0 && s.novelty.activation < 1)) out.push({ key: 'novelty.activation', message: 'must be in (0, 1)' });
  if (!(s.novelty.share > 0 && s.novelty.share <= 1)) out.push({ key: 'novelty.share', message: 'must be in (0, 1]' });
  int('novelty.windowSteps', s.novelty.windowSteps, 1);
  pos('staleAfterMs', s.staleAfterMs);
  nonneg('repeatAlertMs', s.repeatAlertMs);
  return out;
}

/**
 * Design level of the defaults: share of in-control series-years with at least one false alert.
 * Measured on synthetic persistent errors (tests/unit/drift/detection.test.ts, /work/notes/drift.md).
 */
export const DESIGN_FALSE_ALERT_RATE = 0.05;
