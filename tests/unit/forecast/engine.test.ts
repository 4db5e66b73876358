import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { fitAt, forecastAt, parseFittedForecaster, settingsKey, AUTO_CANDIDATES, type HoldoutResiduals } from '../../../src/forecast/engine.ts';
import type { RegularSeries } from '../../../src/series/types.ts';
import { HOUR, hourlySettings, syntheticHourly } from './fixtures.ts';

// Small, fast settings: two weeks of hourly data, 8 centres, one k-means restart.
const small = (over: Parameters<typeof hourlySettings>[0] = {}) => hourlySettings({ windowSteps: 24 * 14, ...over, fit: { nCentres: 8, restarts: 1, widthIterations: 2, ...over.fit } });

function withValues(s: RegularSeries, values: Float64Array): RegularSeries {
  return { ...s, values };
}

describe('fitAt / forecastAt', () => {
  const series = syntheticHourly(24 * 30, 1, 1);
  const settings = small();
  const origin = 24 * 20 + 5;

  it('forecasts H finite values at the steps after the origin', () => {
    const f = fitAt(series, {}, settings, origin);
    const out = forecastAt(f, series, {}, settings, origin);
    expect(out.values.length).toBe(24);
    expect(out.values.every(Number.isFinite)).toBe(true);
    expect(out.targetTimes[0]).toBe(series.startMs + (origin + 1) * HOUR);
    expect(out.targetTimes[23]).toBe(series.startMs + (origin + 24) * HOUR);
    expect(out.novelty).toBeGreaterThan(0);
    expect(out.novelty).toBeLessThanOrEqual(1);
    expect(f.originMs).toBe(series.startMs + origin * HOUR);
    expect(f.trainToMs).toBeLessThanOrEqual(f.originMs - 24 * HOUR);
    expect(f.fitMs).toBeGreaterThanOrEqual(0);
  });

  it('no leakage: any change after the origin leaves the fit and the forecast unchanged', () => {
    const base = fitAt(series, {}, settings, origin);
    const ref = Array.from(forecastAt(base, series, {}, settings, origin).values);
    fc.assert(
      fc.property(fc.integer({ min: origin + 1, max: series.values.length - 1 }), fc.double({ min: -1e6, max: 1e6, noNaN: true }), fc.boolean(), (at, v, toNaN) => {
        const values = series.values.slice();
        for (let i = at; i < values.length; i++) values[i] = toNaN ? Number.NaN : v;
        const changed = withValues(series, values);
        const f = fitAt(changed, {}, settings, origin);
        expect(f.model).toEqual(base.model);
        expect(Array.from(forecastAt(f, changed, {}, settings, origin).values)).toEqual(ref);
      }),
      { numRuns: 6, seed: 42 },
    );
  });

  it('no leakage into the auto choice: it is made on the validation tail before the origin', () => {
    const auto = small({ fit: { nCentres: 'auto', ridge: 'auto' } });
    let holdout: HoldoutResiduals | undefined;
    const f = fitAt(series, {}, auto, origin, undefined, { onHoldout: (h) => (holdout = h) });
    expect(f.auto?.searched).toBe(true);
    expect(f.auto?.tunables).toEqual(['nCentres', 'ridge']);
    expect(AUTO_CANDIDATES.nCentres).toContain(f.chosen.nCentres);
    expect(AUTO_CANDIDATES.ridge).toContain(f.chosen.ridge);
    // The chosen pair is the best candidate tried in the last (ridge) step of the search.
    const ridgeStep = f.auto!.candidates.filter((c) => c.nCentres === f.chosen.nCentres);
    const best = ridgeStep.reduce((a, b) => (b.validationMse < a.validationMse ? b : a));
    expect(best.ridge).toBe(f.chosen.ridge);
    expect(Date.parse(f.auto!.validationFrom!)).toBeLessThan(f.originMs);
    expect(holdout).toBeDefined();
    expect(holdout!.originMs.every((t) => t + 24 * HOUR <= f.originMs)).toBe(true);
    const values = series.values.slice();
    for (let i = origin + 1; i < values.length; i++) values[i] = 1e5 * Math.sin(i);
    const g = fitAt(withValues(series, values), {}, auto, origin);
    expect(g.chosen).toEqual(f.chosen);
    expect(g.auto!.candidates).toEqual(f.auto!.candidates);
  });

  it('a warm refit reuses the auto choice and the centres; changed settings start cold', () => {
    const auto = small({ fit: { nCentres: 'auto' } });
    const first = fitAt(series, {}, auto, origin);
    const next = fitAt(series, {}, auto, origin + 24, first);
    expect(next.warmStarted).toBe(true);
    expect(next.auto?.searched).toBe(false);
    expect(next.chosen).toEqual(first.chosen);
    const other = small({ fit: { nCentres: 'auto', seed: 99 } });
    expect(settingsKey(other)).not.toBe(settingsKey(auto));
    const cold = fitAt(series, {}, other, origin + 24, first);
    expect(cold.warmStarted).toBe(false);
    expect(cold.auto?.searched).toBe(true);
  });

  it('a FittedForecaster survives JSON and stays small: its size does not grow with the window', () => {
    const f = fitAt(series, {}, settings, origin);
    const back = parseFittedForecaster(JSON.stringify(f), settings.series);
    expect(Array.from(forecastAt(back, series, {}, settings, origin).values)).toEqual(Array.from(forecastAt(f, series, {}, settings, origin).values));
    const long = small({ windowSteps: 24 * 19 });
    const g = fitAt(series, {}, long, origin);
    const a = JSON.stringify(f).length;
    const b = JSON.stringify(g).length;
    expect(Math.abs(a - b) / a).toBeLessThan(0.1);
    expect(() => parseFittedForecaster('{"version":1}', 's')).toThrow(/BAD_FITTED/);
    expect(() => parseFittedForecaster('not json', 's')).toThrow(/BAD_FITTED/);
  });

  it('says what is wrong as a coded error', () => {
    const f = fitAt(series, {}, settings, origin);
    expect(() => fitAt(series, {}, settings, series.values.length)).toThrow(/ORIGIN_OUT_OF_RANGE/);
    expect(() => fitAt({ ...series, stepMs: 2 * HOUR }, {}, settings, origin)).toThrow(/BAD_SETTINGS/);
    const gap = series.values.slice();
    gap[origin] = Number.NaN;
    expect(() => forecastAt(f, withValues(series, gap), {}, settings, origin)).toThrow(/MISSING_INPUT/);
    expect(() => fitAt(series, {}, settings, 30)).toThrow(/TOO_LITTLE_HISTORY/);
  });
});
