import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { fitAt, forecastAt, noveltyAt, parseFittedForecaster, settingsKey, AUTO_CANDIDATES, decodeFittedForecaster, encodeFittedForecaster, isPackedForecaster, type FittedForecaster, type HoldoutResiduals } from '../../../src/forecast/engine.ts';
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

  it('noveltyAt equals forecastAt novelty origin by origin, and gives null where the input has a gap', () => {
    const f = fitAt(series, {}, settings, origin);
    const values = series.values.slice();
    values[origin - 30] = Number.NaN; // a gap: the lag-1 input of origin - 29 is missing
    const gappy = withValues(series, values);
    const origins = Array.from({ length: 23 }, (_, i) => origin - 40 + i);
    const batch = noveltyAt(f, gappy, {}, settings, origins);
    origins.forEach((o, i) => {
      let one: number | null = null;
      try {
        one = forecastAt(f, gappy, {}, settings, o).novelty;
      } catch {
        one = null;
      }
      expect(batch[i]).toBe(one);
    });
    expect(batch.some((v) => v === null)).toBe(true);
    expect(batch.filter((v) => v !== null).length).toBeGreaterThan(5);
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

describe('packed forecaster (state store form)', () => {
  const series = syntheticHourly(24 * 30, 1, 1);
  const settings = small();
  const origin = 24 * 20 + 5;
  const f = fitAt(series, {}, settings, origin);
  const bytesOf = (a: Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);
  /** Every number of both forecasters is the same double (Object.is: -0 and 0 differ). */
  const sameNumbers = (a: number[], b: number[]) => a.length === b.length && a.every((v, i) => Object.is(v, b[i]));

  it('decodes to exactly the same forecaster, and its predictions are bit-for-bit equal', () => {
    const packed = encodeFittedForecaster(f);
    expect(isPackedForecaster(packed)).toBe(true);
    const back = decodeFittedForecaster(packed, settings.series);
    expect(back).toEqual(f);
    for (const k of ['centres', 'gammas', 'weights'] as const) expect(sameNumbers(back.model[k], f.model[k])).toBe(true);
    expect(sameNumbers(back.scaler.mean, f.scaler.mean) && sameNumbers(back.scaler.scale, f.scaler.scale)).toBe(true);
    for (const o of [origin, origin + 3, origin + 30]) {
      expect(bytesOf(forecastAt(back, series, {}, settings, o).values).equals(bytesOf(forecastAt(f, series, {}, settings, o).values))).toBe(true);
    }
    // A warm refit from the decoded forecaster is the refit from the original.
    const w1 = fitAt(series, {}, settings, origin + 24, f);
    const w2 = fitAt(series, {}, settings, origin + 24, back);
    expect(w2.warmStarted).toBe(true);
    expect({ ...w2, fitMs: 0 }).toEqual({ ...w1, fitMs: 0 });
    // About half of the JSON text: ~3.5k doubles are 8 bytes each instead of ~19 characters.
    expect(packed.length).toBeLessThan(0.6 * JSON.stringify(f).length);
    // The bytes own their buffer (they are moved between threads).
    expect(packed.byteOffset).toBe(0);
    expect(packed.buffer.byteLength).toBe(packed.length);
  });

  it('keeps doubles JSON text cannot: -0, subnormals, the largest finite double', () => {
    const centres = f.model.centres.slice();
    centres[0] = -0;
    centres[1] = 5e-324; // smallest subnormal
    centres[2] = Number.MAX_VALUE;
    centres[3] = 0.1 + 0.2;
    const g: FittedForecaster = { ...f, model: { ...f.model, centres } };
    const back = decodeFittedForecaster(encodeFittedForecaster(g));
    expect(sameNumbers(back.model.centres, centres)).toBe(true);
  });

  it('writes the arrays as IEEE 754 binary64, little-endian', () => {
    // IEEE 754-2008, binary64: 1.0 = 0x3FF0000000000000, -2.0 = 0xC000000000000000,
    // 0.1 = 0x3FB999999999999A (the nearest double to 0.1); little-endian = least significant byte first.
    const scale = f.scaler.scale.slice();
    const n = scale.length;
    scale[n - 3] = 1;
    scale[n - 2] = 0.1;
    scale[n - 1] = 2; // positive: scales must be > 0
    const packed = encodeFittedForecaster({ ...f, scaler: { ...f.scaler, scale } });
    const tail = Buffer.from(packed.subarray(packed.length - 24)).toString('hex');
    expect(tail).toBe('000000000000f03f' + '9a9999999999b93f' + '0000000000000040');
    const mean = f.scaler.mean.slice();
    mean[n - 1] = -2;
    const p2 = encodeFittedForecaster({ ...f, scaler: { ...f.scaler, mean } });
    // mean comes just before scale in the packed arrays
    expect(Buffer.from(p2.subarray(p2.length - 8 * n - 8, p2.length - 8 * n)).toString('hex')).toBe('00000000000000c0');
  });

  it('a damaged stored forecaster is a BAD_FITTED error naming the series, whatever the damage', () => {
    const packed = encodeFittedForecaster(f);
    const damaged: Array<[string, Uint8Array]> = [
      ['truncated', packed.subarray(0, packed.length - 8)],
      ['empty', new Uint8Array(0)],
      ['not packed', new TextEncoder().encode('{"version":1}')],
      ['bad magic', Uint8Array.from(packed, (b, i) => (i === 0 ? b ^ 1 : b))],
      ['bad header', Uint8Array.from(packed, (b, i) => (i === 17 ? 0x7b : b))],
    ];
    // The float64 values start after the 16-byte prefix and the header, padded to 8 bytes.
    const headerEnd = 16 + new DataView(packed.buffer).getUint32(8, true);
    const valuesAt = headerEnd + ((8 - (headerEnd % 8)) % 8);
    const nan = packed.slice();
    nan.fill(0xff, valuesAt + 8, valuesAt + 16); // the second centre coordinate becomes a NaN
    damaged.push(['NaN centre', nan]);
    for (const [what, b] of damaged) {
      let err: unknown;
      try {
        decodeFittedForecaster(b, 'tarrow-hill');
      } catch (e) {
        err = e;
      }
      expect(err, what).toMatchObject({ code: 'BAD_FITTED', series: 'tarrow-hill' });
    }
    // The JSON text of older state files still decodes.
    expect(decodeFittedForecaster(JSON.stringify(f), settings.series)).toEqual(f);
  });
});
