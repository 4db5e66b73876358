import { describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { MetricAccumulator, centralIntervals, pinballLoss, scoreForecasts, seasonalScale } from '../../../src/evaluate/metrics.ts';
import { rng, gaussian } from '../forecast/fixtures.ts';

describe('metrics on hand-worked examples', () => {
  // actual [10, 12, 14], forecast [11, 11, 11] -> e = actual - forecast = [-1, 1, 3]
  //   MAE  = (1 + 1 + 3) / 3 = 5/3
  //   RMSE = sqrt((1 + 1 + 9) / 3) = sqrt(11/3)
  //   bias = (-1 + 1 + 3) / 3 = 1 (positive: forecasts too low)
  //   MASE with scale 2 = mean(|e| / 2) = 5/6
  it('MAE, RMSE, bias and MASE', () => {
    const acc = new MetricAccumulator();
    const actual = [10, 12, 14];
    for (const a of actual) acc.add(a, 11, 2);
    const r = acc.result();
    expect(r.n).toBe(3);
    expect(r.mae).toBeCloseTo(5 / 3, 14);
    expect(r.rmse).toBeCloseTo(Math.sqrt(11 / 3), 14);
    expect(r.bias).toBeCloseTo(1, 14);
    expect(r.mase).toBeCloseTo(5 / 6, 14);
    expect(r.coverage).toBeNull();
  });

  // values [1, 3, 2, 5, 4, 6], m = 2: |2-1| = 1, |5-3| = 2, |4-2| = 2, |6-5| = 1 -> 6 / 4 = 1.5
  it('seasonal scale is the mean absolute seasonal difference', () => {
    const s = seasonalScale([1, 3, 2, 5, 4, 6], 0, 5, 2);
    expect(s.scale).toBe(1.5);
    expect(s.pairs).toBe(4);
    expect(s.m).toBe(2);
    // NaN at index 2 removes the two pairs it is part of (t = 2 and t = 4): |5-3| = 2 and |6-5| = 1 remain -> 1.5
    const g = seasonalScale([1, 3, Number.NaN, 5, 4, 6], 0, 5, 2);
    expect(g.pairs).toBe(2);
    expect(g.scale).toBe(1.5);
  });

  // Pinball loss L_q(y, b) = max(q (y - b), (q - 1)(y - b)) (Koenker & Bassett 1978, the check function):
  //   q = 0.9, y = 10: b = 8 -> 0.9 * 2 = 1.8; b = 12 -> (-0.1)(-2) = 0.2
  //   q = 0.1, y = 10: b = 8 -> 0.1 * 2 = 0.2; b = 12 -> (-0.9)(-2) = 1.8
  it('pinball loss', () => {
    expect(pinballLoss(10, 8, 0.9)).toBeCloseTo(1.8, 14);
    expect(pinballLoss(10, 12, 0.9)).toBeCloseTo(0.2, 14);
    expect(pinballLoss(10, 8, 0.1)).toBeCloseTo(0.2, 14);
    expect(pinballLoss(10, 12, 0.1)).toBeCloseTo(1.8, 14);
  });

  // Bands [8, 12], [13, 15], [10, 14] for actuals 10, 12, 14: inside, below, on the upper edge (inside)
  //   coverage = 2/3, mean width = (4 + 2 + 4) / 3 = 10/3
  //   below the 0.1 band: only 12 < 13 -> 1/3; below the 0.9 band: 10 < 12, 12 < 15 -> 2/3
  //   pinball q=0.1: y-b = 2, -1, 4 -> 0.2, 0.9, 0.4 -> mean 0.5
  //   pinball q=0.9: y-b = -2, -3, 0 -> 0.2, 0.3, 0 -> mean 0.5/3
  it('band coverage, width, share below and pinball', () => {
    const acc = new MetricAccumulator([0.1, 0.9]);
    acc.add(10, 10, 1, [8, 12]);
    acc.add(12, 14, 1, [13, 15]);
    acc.add(14, 12, 1, [10, 14]);
    const r = acc.result();
    expect(r.coverage).toBeCloseTo(2 / 3, 14);
    expect(r.nominalCoverage).toBeCloseTo(0.8, 12);
    expect(r.width).toBeCloseTo(10 / 3, 14);
    expect(r.belowByQuantile['0.1']).toBeCloseTo(1 / 3, 14);
    expect(r.belowByQuantile['0.9']).toBeCloseTo(2 / 3, 14);
    expect(r.pinballByQuantile['0.1']).toBeCloseTo(0.5, 14);
    expect(r.pinballByQuantile['0.9']).toBeCloseTo(0.5 / 3, 14);
    expect(r.pinball).toBeCloseTo((1.5 + 0.5) / 6, 14);
  });

  it('skips missing actuals or forecasts and counts them', () => {
    const acc = new MetricAccumulator();
    acc.add(Number.NaN, 1, 1);
    acc.add(1, Number.NaN, 1);
    acc.add(3, 1, Number.NaN); // no scale: counts for MAE but not MASE
    const r = acc.result();
    expect(r.n).toBe(1);
    expect(r.missing).toBe(2);
    expect(r.mae).toBe(2);
    expect(r.mase).toBeNull();
  });

  it('pairs quantiles into central intervals, widest first', () => {
    expect(centralIntervals([0.05, 0.1, 0.5, 0.9, 0.95]).map((i) => [i.lower, i.upper])).toEqual([
      [0.05, 0.95],
      [0.1, 0.9],
    ]);
    expect(centralIntervals([0.1, 0.8])).toEqual([]);
  });
});

describe('MASE (Hyndman & Koehler 2006, Int. J. Forecasting 22(4))', () => {
  it('the in-sample seasonal naive forecast has MASE 1 on its own scaling window', () => {
    const g = gaussian(rng(3));
    const m = 24;
    const values = Array.from({ length: 24 * 20 }, (_, i) => 100 + 20 * Math.sin((2 * Math.PI * i) / m) + 5 * g());
    const { scale } = seasonalScale(values, 0, values.length - 1, m);
    const acc = new MetricAccumulator();
    for (let t = m; t < values.length; t++) acc.add(values[t], values[t - m], scale);
    // Same sum divided twice by the same count: equal up to rounding of the last bit.
    expect(acc.result().mase).toBeCloseTo(1, 13);
  });

  it('per-lead and per-forecast summaries partition the overall score', () => {
    const f = [
      { actual: [1, 2], forecast: [0, 0], scale: 1 },
      { actual: [3, 5], forecast: [0, 0], scale: 2 },
    ];
    const s = scoreForecasts(f, 2, [], 24);
    expect(s.season).toBe(24);
    // lead 1: |1|/1, |3|/2 -> (1 + 1.5)/2; lead 2: |2|/1, |5|/2 -> (2 + 2.5)/2
    expect(s.byLead[0].mase).toBeCloseTo(1.25, 14);
    expect(s.byLead[1].mase).toBeCloseTo(2.25, 14);
    expect(s.byForecast[0].mae).toBeCloseTo(1.5, 14);
    expect(s.byForecast[1].mae).toBeCloseTo(4, 14);
    expect(s.overall.mase).toBeCloseTo((1 + 2 + 1.5 + 2.5) / 4, 14);
  });
});

// Reference library: scikit-learn (Debian package python3-sklearn), sklearn.metrics
// mean_absolute_error, mean_squared_error and mean_pinball_loss on the same random data.
describe('agreement with scikit-learn', () => {
  it('MAE, RMSE and pinball loss match sklearn.metrics', () => {
    const r = rng(11);
    const n = 200;
    const y = Array.from({ length: n }, () => 10 * r());
    const f = y.map((v) => v + 3 * (r() - 0.4));
    const lo = f.map((v) => v - 1.5);
    const hi = f.map((v) => v + 1.7);
    const acc = new MetricAccumulator([0.1, 0.9]);
    for (let i = 0; i < n; i++) acc.add(y[i], f[i], 1, [lo[i], hi[i]]);
    const ours = acc.result();
    const script = [
      'import json, sys',
      'from sklearn.metrics import mean_absolute_error, mean_squared_error, mean_pinball_loss',
      'd = json.load(sys.stdin)',
      'print(json.dumps([mean_absolute_error(d["y"], d["f"]), mean_squared_error(d["y"], d["f"]) ** 0.5,',
      '  mean_pinball_loss(d["y"], d["lo"], alpha=0.1), mean_pinball_loss(d["y"], d["hi"], alpha=0.9)]))',
    ].join('\n');
    const out = execFileSync('/usr/bin/python3', ['-c', script], { input: JSON.stringify({ y, f, lo, hi }) }).toString();
    const [mae, rmse, p10, p90] = JSON.parse(out) as number[];
    expect(ours.mae).toBeCloseTo(mae, 12);
    expect(ours.rmse).toBeCloseTo(rmse, 12);
    expect(ours.pinballByQuantile['0.1']).toBeCloseTo(p10, 12);
    expect(ours.pinballByQuantile['0.9']).toBeCloseTo(p90, 12);
  });
});
