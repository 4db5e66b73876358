/**
 * Synthetic data for the tuner whose best number of centres is known by construction: the series
 * is a Gaussian RBF of a driving input with four centres plus noise,
 *
 *   y[t] = 20 + sum_j a_j exp(-(x[t-1] - c_j)^2 / (2 s^2)) + noise,   c = 1.5, 4, 6.5, 9,
 *
 * where the input x is drawn around the four centres. A network with about four Gaussian units
 * on the input reproduces it; one or two cannot, and many more only fit the noise.
 */
import type { RegularSeries } from '../../../src/series/types.ts';
import { gaussian, HOUR, rng } from '../forecast/fixtures.ts';

export const TRUE_CENTRES = [1.5, 4, 6.5, 9];
const AMPLITUDES = [8, -6, 7, -5];
const WIDTH = 0.6;

export function rbfTruth(x: number): number {
  let s = 0;
  for (let j = 0; j < TRUE_CENTRES.length; j++) s += AMPLITUDES[j] * Math.exp(-((x - TRUE_CENTRES[j]) ** 2) / (2 * WIDTH * WIDTH));
  return s;
}

export function knownRbfSeries(nSteps: number, opts: { seed?: number; noiseSd?: number; startMs?: number } = {}): { target: RegularSeries; drive: RegularSeries } {
  const seed = opts.seed ?? 11;
  const pick = rng(seed);
  const spread = gaussian(rng(seed + 2));
  const noise = gaussian(rng(seed + 1));
  const sd = opts.noiseSd ?? 2;
  const x = new Float64Array(nSteps);
  const y = new Float64Array(nSteps);
  for (let i = 0; i < nSteps; i++) x[i] = TRUE_CENTRES[Math.floor(TRUE_CENTRES.length * pick())] + 0.35 * spread();
  for (let i = 0; i < nSteps; i++) y[i] = 20 + (i > 0 ? rbfTruth(x[i - 1]) : 0) + sd * noise();
  const stats = { readingsIn: nSteps, dropped: 0, outOfRange: 0, duplicates: 0, filled: 0, missingSteps: 0 };
  const startMs = opts.startMs ?? Date.UTC(2024, 0, 1);
  return { target: { startMs, stepMs: HOUR, values: y, stats: { ...stats } }, drive: { startMs, stepMs: HOUR, values: x, stats: { ...stats } } };
}

/**
 * Config of the synthetic series: one-step forecasts from the driving input's last value, lags of
 * the series itself nearly switched off in the distances, no calendar inputs, absolute target.
 */
export function knownRbfConfig(over: { tune?: string; backtest?: string; window?: string; store?: string } = {}): string {
  return `# synthetic series for the tuner tests
${over.store ?? ''}
series:
  - name: synthetic
    horizon: 1
    window: ${over.window ?? '200'}
    lags: [1]
    seasonalInputs: false
    calendar: { hourOfDay: false, dayOfWeek: false }
    exogenous: [{ name: drive, lags: [1] }]
    targetMode: absolute
    groupWeights: { lags: 0.001 }
    linearTerms: false
    ridge: 0.000001
    fit: { restarts: 2, maxPasses: 50, widthIterations: 3 }
    backtest: ${over.backtest ?? '{ every: 4, span: 60 }'}
    tune: ${over.tune ?? '{ windows: [200], centres: [1, 2, 4, 8, 32], widthModes: [shared] }'}
`;
}
