import { describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { fitRidgeAr, forecastRidgeAr, seasonalBaselines, seasonalNaiveForecast } from '../../../src/evaluate/baselines.ts';
import { gaussian, rng } from '../forecast/fixtures.ts';

describe('seasonal naive', () => {
  it('repeats the latest complete season', () => {
    const v = Array.from({ length: 30 }, (_, i) => i);
    // origin 20, m = 7: lead h uses index 20 + h - 7 ceil(h / 7): h = 1..7 -> 14..20, h = 8..10 -> 14..16
    expect(Array.from(seasonalNaiveForecast(v, 20, 10, 7))).toEqual([14, 15, 16, 17, 18, 19, 20, 14, 15, 16]);
  });

  it('goes one season further back when the value is missing', () => {
    const v = Array.from({ length: 30 }, (_, i) => i);
    v[14] = Number.NaN;
    expect(seasonalNaiveForecast(v, 20, 1, 7)[0]).toBe(7);
  });

  it('offers daily and weekly seasons where the step divides them', () => {
    expect(seasonalBaselines(3_600_000)).toEqual([
      { name: 'seasonal-naive-daily', m: 24 },
      { name: 'seasonal-naive-weekly', m: 168 },
    ]);
    expect(seasonalBaselines(86_400_000)).toEqual([
      { name: 'seasonal-naive-daily', m: 1 },
      { name: 'seasonal-naive-weekly', m: 7 },
    ]);
    // 7 h divides neither a day nor... it divides a week (168 = 24 * 7): weekly only.
    expect(seasonalBaselines(7 * 3_600_000)).toEqual([{ name: 'seasonal-naive-weekly', m: 24 }]);
  });
});

describe('ridge autoregression baseline', () => {
  it('recovers a noise-free AR(2) recursion exactly with a zero penalty', () => {
    // y_t = 1.6 y_{t-1} - 0.99 y_{t-2} + 3: a slowly damped oscillation (roots of modulus 0.995),
    // so the lags never become collinear within the window.
    const v = [10, 4];
    for (let t = 2; t < 200; t++) v.push(1.6 * v[t - 1] - 0.99 * v[t - 2] + 3);
    const m = fitRidgeAr(v, 0, 150, [1, 2], 1, { ridge: 0 });
    const f = forecastRidgeAr(m, v, 160);
    expect(f[0]).toBeCloseTo(1.6 * v[160] - 0.99 * v[159] + 3, 6);
  });

  // Reference: numpy.linalg.lstsq (Debian python3-numpy) on [1, lag_1, lag_24] with the same
  // samples; with ridge = 0 both are ordinary least squares, so the forecasts agree.
  it('matches ordinary least squares from numpy with a zero penalty', () => {
    const g = gaussian(rng(2));
    const v = Array.from({ length: 600 }, (_, i) => 20 + 5 * Math.sin((2 * Math.PI * i) / 24) + g());
    const lags = [1, 24];
    const H = 3;
    const from = 100;
    const origin = 500;
    const m = fitRidgeAr(v, from, origin, lags, H, { ridge: 0 });
    const ours = Array.from(forecastRidgeAr(m, v, origin));
    const script = [
      'import json, sys, numpy as np',
      'd = json.load(sys.stdin); v = np.array(d["v"]); lags = d["lags"]; H = d["H"]; lo = d["from"]; o0 = d["origin"]',
      'rows = range(lo + max(lags) - 1, o0 - H + 1)',
      'X = np.array([[1.0] + [v[o + 1 - k] for k in lags] for o in rows])',
      'Y = np.array([[v[o + h] for h in range(1, H + 1)] for o in rows])',
      'W = np.linalg.lstsq(X, Y, rcond=None)[0]',
      'x = np.array([1.0] + [v[o0 + 1 - k] for k in lags])',
      'print(json.dumps((x @ W).tolist()))',
    ].join('\n');
    const out = execFileSync('/usr/bin/python3', ['-c', script], { input: JSON.stringify({ v, lags, H, from, origin }) }).toString();
    const ref = JSON.parse(out) as number[];
    for (let h = 0; h < H; h++) expect(ours[h]).toBeCloseTo(ref[h], 9);
  });

  it('reports too few samples as an error, and a missing input as NaN forecasts', () => {
    const v = Array.from({ length: 30 }, (_, i) => i % 5);
    expect(() => fitRidgeAr(v, 0, 10, [1, 2, 3, 4, 5, 6, 7, 8], 1)).toThrow(/ridge baseline needs more than 8/);
    const m = fitRidgeAr(v, 0, 29, [1, 2], 1);
    const w = [...v];
    w[20] = Number.NaN;
    expect(forecastRidgeAr(m, w, 20)[0]).toBeNaN();
  });
});
