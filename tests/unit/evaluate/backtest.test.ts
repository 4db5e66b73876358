import { describe, expect, it } from 'vitest';
import { backtest, backtestJson, backtestOrigins, MODEL_METHOD } from '../../../src/evaluate/backtest.ts';
import type { RegularSeries } from '../../../src/series/types.ts';
import { gaussian, HOUR, hourlySettings, rng, syntheticHourly } from '../forecast/fixtures.ts';

const small = (over: Parameters<typeof hourlySettings>[0] = {}) => hourlySettings({ windowSteps: 24 * 14, ...over, fit: { nCentres: 8, restarts: 1, widthIterations: 2, ...over.fit } });

describe('rolling origins', () => {
  it('are every `every` steps over the last `span`, ending H steps before the newest value', () => {
    const s = syntheticHourly(24 * 30, 1);
    const st = small();
    const { origins, skippedForHistory } = backtestOrigins(s, st, 24 * 5, 24);
    // newest value index 719, H = 24 -> last origin 695; span 120 -> origins >= 599
    expect(origins).toEqual([599, 623, 647, 671, 695]);
    expect(skippedForHistory).toBe(0);
    // A window of 25 days leaves no room for origins before day 25
    const few = backtestOrigins(s, small({ windowSteps: 24 * 28 }), 24 * 5, 24);
    expect(few.origins).toEqual([671, 695]);
    expect(few.skippedForHistory).toBe(3);
    expect(() => backtestOrigins(s, st, 24, 0)).toThrow(/BAD_SETTINGS/);
  });
});

describe('backtest', () => {
  const series = syntheticHourly(24 * 24, 2, 1);
  const settings = small({ windowSteps: 24 * 12 });
  const opts = { spanSteps: 24 * 4, everySteps: 24, chainLength: 2 };

  it('scores the model beside the baselines on the same origins, the same with and without workers', async () => {
    const seen: number[] = [];
    const inline = await backtest(series, {}, settings, { ...opts, workers: 0, onProgress: (p) => seen.push(p.done) });
    const threaded = await backtest(series, {}, settings, { ...opts, workers: 2 });
    expect(inline.origins).toBe(4);
    expect(inline.methods.map((m) => m.name)).toEqual([MODEL_METHOD, 'seasonal-naive-daily', 'seasonal-naive-weekly', 'ridge-ar']);
    for (const m of inline.methods) expect(m.overall.n).toBe(4 * 24);
    expect(seen[seen.length - 1]).toBe(4);
    expect(inline.fit.coldFits).toBe(2); // chains of two: a cold fit, then a warm refit
    expect(inline.fit.warmFits).toBe(2);
    expect(threaded.workers).toBe(2);
    expect(threaded.methods).toEqual(inline.methods);
    expect(threaded.details.map((d) => d.forecasts)).toEqual(inline.details.map((d) => d.forecasts));
  });

  it('no leakage: altering the data after an origin leaves that origin and earlier ones unchanged', async () => {
    const ref = await backtest(series, {}, settings, { ...opts, workers: 0 });
    const cut = ref.details[1].originIndex;
    const values = series.values.slice();
    const g = gaussian(rng(9));
    for (let i = cut + 1; i < values.length; i++) values[i] = 500 + 100 * g();
    const alt = await backtest({ ...series, values }, {}, settings, { ...opts, workers: 0 });
    for (const k of [0, 1]) {
      expect(alt.details[k].forecasts).toEqual(ref.details[k].forecasts);
      expect(alt.details[k].bands).toEqual(ref.details[k].bands);
    }
    expect(alt.details[2].forecasts[MODEL_METHOD]).not.toEqual(ref.details[2].forecasts[MODEL_METHOD]);
  });

  it('keeps going when one origin cannot be forecast, and says why', async () => {
    const values = series.values.slice();
    const o = backtestOrigins(series, settings, opts.spanSteps, opts.everySteps).origins[2];
    for (let i = o - 10; i <= o; i++) values[i] = Number.NaN; // a gap longer than maxFill reaching the origin
    const r = await backtest({ ...series, values }, {}, settings, { ...opts, workers: 0 });
    expect(r.failed.length).toBeGreaterThanOrEqual(1);
    expect(r.failed[0].originMs).toBe(series.startMs + o * HOUR);
    expect(r.failed[0].code).toBe('MISSING_INPUT');
    expect(r.origins).toBe(4 - r.failed.length);
  });

  it('writes the --json document scripts compare', async () => {
    const r = await backtest(series, {}, settings, { ...opts, workers: 0 });
    const doc = JSON.parse(JSON.stringify(backtestJson(r))) as Record<string, any>;
    expect(doc.series).toBe('synthetic');
    expect(doc.step).toBe('1h');
    expect(doc.season).toBe(24);
    expect(doc.horizon).toBe(24);
    expect(doc.origins).toBe(4);
    for (const k of ['mae', 'rmse', 'mase', 'bias', 'coverage']) expect(typeof doc.model[k]).toBe('number');
    expect(Object.keys(doc.baselines)).toEqual(['seasonal-naive-daily', 'seasonal-naive-weekly', 'ridge-ar']);
    for (const b of Object.values(doc.baselines) as Array<Record<string, unknown>>) for (const k of ['mae', 'rmse', 'mase', 'bias', 'coverage']) expect(typeof b[k]).toBe('number');
    expect(doc.byLead[MODEL_METHOD]).toHaveLength(24);
  });

  it('fails with NO_ORIGINS when the history is shorter than one window', async () => {
    await expect(backtest(syntheticHourly(24 * 5, 1), {}, settings, { ...opts, workers: 0 })).rejects.toThrow(/NO_ORIGINS/);
  });
});

describe('band coverage on synthetic data with known noise', () => {
  // A weekly-periodic signal plus i.i.d. N(0, 1) noise: the weekly seasonal-naive residual is the
  // difference of two independent noise values, N(0, 2), exchangeable across origins, so its
  // conformal 10%..90% band should cover close to 80 %. The fitted models carry estimation error on
  // top; their coverage must still be near the nominal level.
  it('is close to nominal', async () => {
    const n = 24 * 7 * 7;
    const g = gaussian(rng(21));
    const values = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      const hour = i % 24;
      const day = Math.floor(i / 24) % 7;
      values[i] = 40 + 8 * Math.sin((2 * Math.PI * hour) / 24) + 3 * Math.cos((2 * Math.PI * day) / 7) + g();
    }
    const s: RegularSeries = { startMs: Date.UTC(2024, 0, 1), stepMs: HOUR, values, stats: { readingsIn: n, dropped: 0, outOfRange: 0, duplicates: 0, filled: 0, missingSteps: 0 } };
    const st = hourlySettings({ windowSteps: 24 * 28, lags: [1, 2, 24, 168], fit: { nCentres: 8, restarts: 1, widthIterations: 2 } });
    const r = await backtest(s, {}, st, { spanSteps: 24 * 14, everySteps: 12, workers: 0, chainLength: 7 });
    const weekly = r.methods.find((m) => m.name === 'seasonal-naive-weekly')!;
    const model = r.methods.find((m) => m.name === MODEL_METHOD)!;
    expect(weekly.overall.nominalCoverage).toBeCloseTo(0.8, 12);
    expect(weekly.overall.coverage!).toBeGreaterThan(0.74);
    expect(weekly.overall.coverage!).toBeLessThan(0.86);
    expect(model.overall.coverage!).toBeGreaterThan(0.72);
    expect(model.overall.coverage!).toBeLessThan(0.88);
  });
});
