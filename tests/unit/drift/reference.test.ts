/**
 * The detector's building blocks against published definitions and a handbook worked example.
 */
import { describe, expect, it } from 'vitest';
import { cusumUpdate, groupByTarget, levelOf, scaledError, DRIFT_DEFAULTS } from '../../../src/drift/index.ts';

describe("Page's one-sided CUSUM", () => {
  // Tabular CUSUM worked example: 30 observations, target mu0 = 10, sigma = 1, k = 0.5, h = 5; the
  // first 20 from N(10, 1), the last 10 after a shift to 11. Source: D. C. Montgomery, "Introduction
  // to Statistical Quality Control" (Wiley), tabular CUSUM example (Example 9.1 in the 6th edition).
  // The data and the published outcome (C+ exceeds H = 5 first at sample 29 with C+ = 5.28, N+ = 7)
  // are quoted from memory; the C+ column below is what that recursion gives for the data.
  const x = [9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.2, 10.34, 9.03, 11.47, 10.51, 9.4, 10.08, 9.37, 10.62, 10.31, 8.52, 10.84, 10.9, 9.33, 12.29, 11.5, 10.6, 11.08, 10.38, 11.62, 11.31, 10.52];
  const cPlus = [0, 0, 0, 1.16, 2.82, 2.5, 0.04, 1.0, 0, 0, 0, 0.97, 0.98, 0, 0, 0, 0.12, 0, 0, 0.34, 0.74, 0, 1.79, 2.79, 2.89, 3.47, 3.35, 4.47, 5.28, 5.3];

  it('reproduces the C+ column and signals first at sample 29', () => {
    let s = 0;
    let firstSignal = -1;
    let run = 0;
    x.forEach((xi, i) => {
      // batch units with b = 1: S_i = max(0, S_{i-1} + z_i - k), z_i = (x_i - mu0) / sigma
      s = cusumUpdate(s, (xi - 10) / 1, 0.5, 1, Infinity);
      run = s > 0 ? run + 1 : 0;
      expect(s).toBeCloseTo(cPlus[i], 2);
      if (firstSignal < 0 && s > 5) {
        firstSignal = i + 1;
        expect(run).toBe(7); // N+: the shift is estimated to have started after sample 29 - 7 = 22
      }
    });
    expect(firstSignal).toBe(29);
  });

  it('stays within [0, cap]', () => {
    expect(cusumUpdate(0, -50, 1, 24, 20)).toBe(0);
    expect(cusumUpdate(19.9, 500, 1, 24, 20)).toBe(20);
  });

  it('levels follow the thresholds', () => {
    expect(levelOf(DRIFT_DEFAULTS.watchThreshold - 1e-9, DRIFT_DEFAULTS)).toBe('ok');
    expect(levelOf(DRIFT_DEFAULTS.watchThreshold, DRIFT_DEFAULTS)).toBe('watch');
    expect(levelOf(DRIFT_DEFAULTS.alertThreshold, DRIFT_DEFAULTS)).toBe('alert');
  });
});

describe('scaled errors (Hyndman & Koehler 2006, "Another look at measures of forecast accuracy", IJF 22(4))', () => {
  it('q = |e| / (mean absolute seasonal difference of the training data); their mean is the MASE', () => {
    // Hand-worked: training series with season m = 3: 10 12 14 13 15 17 20 18 19
    const train = [10, 12, 14, 13, 15, 17, 20, 18, 19];
    let sum = 0;
    for (let i = 3; i < train.length; i++) sum += Math.abs(train[i] - train[i - 3]);
    const scale = sum / (train.length - 3); // (3 + 3 + 3 + 7 + 3 + 2) / 6 = 3.5
    expect(scale).toBe(3.5);
    const actual = [21, 16, 22];
    const forecast = [20, 18, 22];
    const q = actual.map((a, i) => scaledError(a, forecast[i], scale));
    expect(q).toEqual([1 / 3.5, 2 / 3.5, 0]);
    expect(q.reduce((a, b) => a + b, 0) / q.length).toBeCloseTo(3 / 3.5 / 3, 12);
  });

  it('is NaN for a zero or missing scale and non-finite values', () => {
    expect(scaledError(1, 2, 0)).toBeNaN();
    expect(scaledError(Number.NaN, 2, 1)).toBeNaN();
    expect(scaledError(1, Number.POSITIVE_INFINITY, 1)).toBeNaN();
  });

  it('groups by target time, oldest first, mean ratio over leads', () => {
    const g = groupByTarget(
      [
        { t: 2, lead: 1, scaledError: 1 },
        { t: 1, lead: 2, scaledError: 4 },
        { t: 1, lead: 1, scaledError: 2 },
        { t: 0, lead: 1, scaledError: 9 },
      ],
      0,
      (lead) => lead, // baseline 1 for lead 1, 2 for lead 2
    );
    expect(g.stale).toBe(1);
    expect(g.observations).toEqual([
      { t: 1, ratio: (2 / 1 + 4 / 2) / 2, errorSum: 6, count: 2 },
      { t: 2, ratio: 1, errorSum: 1, count: 1 },
    ]);
  });
});
