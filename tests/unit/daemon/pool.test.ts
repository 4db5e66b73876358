import { afterAll, describe, expect, it } from 'vitest';
import { InlineFitter, PoolFitter } from '../../../src/daemon/pool.ts';
import { regularize, lastValueIndex } from '../../../src/series/index.ts';
import type { FitRequest } from '../../../src/daemon/ports.ts';
import { decodeFittedForecaster, forecastAt, type FittedForecaster } from '../../../src/forecast/engine.ts';
import { HOUR, resolved, syntheticLoad } from './fakes.ts';

const END = Date.UTC(2026, 10, 30);
const pool = new PoolFitter({ threads: 1 });
afterAll(async () => {
  await pool.stop();
});

/** A forecaster without its wall-clock fit time (the one field two identical fits differ in). */
const untimed = (f: FittedForecaster) => ({ ...f, fitMs: 0 });

function request(): FitRequest {
  const [s] = resolved([{ name: 'oskaveld-north' }]);
  const target = regularize(syntheticLoad({ fromMs: END - 40 * 24 * HOUR, toMs: END }), { ...s.settings.regularize, stepMs: HOUR, startMs: END - 30 * 24 * HOUR, endMs: END, series: s.name });
  return { settings: s.settings, target, exo: {}, originIndex: lastValueIndex(target), warm: null, holdout: true };
}

describe('fit pool', () => {
  it('a worker thread computes exactly what the inline fitter computes', async () => {
    const req = request();
    const a = await new InlineFitter().fitAndForecast(req);
    const b = await pool.fitAndForecast(req);
    expect(Array.from(b.forecast.values)).toEqual(Array.from(a.forecast.values));
    // The worker sends the forecaster packed (bytes moved back), not as a cloned object.
    expect(b.fitted).toBeUndefined();
    expect(untimed(decodeFittedForecaster(b.stored, 'oskaveld-north'))).toEqual(untimed(decodeFittedForecaster(a.stored, 'oskaveld-north')));
    expect(decodeFittedForecaster(b.stored, 'oskaveld-north').model).toEqual(a.fitted.model);
    expect(b.warmStarted).toBe(false);
    expect(b.holdout?.residualsByLead).toEqual(a.holdout?.residualsByLead);
    expect(b.fitMs).toBeGreaterThan(0);
    const c = await pool.fitAndForecast({ ...req, returnFitted: true });
    expect(c.fitted?.model).toEqual(a.fitted.model);
  });

  it('the worker decodes the stored warm start: same refit as inline from the decoded forecaster', async () => {
    const req = request();
    const first = await new InlineFitter().fitAndForecast(req);
    const next: FitRequest = { ...req, originIndex: req.originIndex - 1, holdout: false };
    const fromObject = await new InlineFitter().fitAndForecast({ ...next, warm: first.fitted });
    const fromBytes = await pool.fitAndForecast({ ...next, warmStored: first.stored });
    expect(fromObject.warmStarted).toBe(true);
    expect(fromBytes.warmStarted).toBe(true);
    expect(fromBytes.warmRejected).toBeUndefined();
    expect(untimed(decodeFittedForecaster(fromBytes.stored))).toEqual(untimed(fromObject.fitted));
    expect(Array.from(fromBytes.forecast.values)).toEqual(Array.from(fromObject.forecast.values));
    // Older state files hold the forecaster as JSON text: it warm-starts the same way.
    const fromJson = await pool.fitAndForecast({ ...next, warmStored: JSON.stringify(first.fitted) });
    expect(Array.from(fromJson.forecast.values)).toEqual(Array.from(fromObject.forecast.values));
    // Predictions of the decoded forecaster are bit-for-bit those of the original.
    const back = decodeFittedForecaster(first.stored, 'oskaveld-north');
    const p0 = forecastAt(first.fitted, req.target, {}, req.settings, req.originIndex).values;
    expect(Buffer.from(forecastAt(back, req.target, {}, req.settings, req.originIndex).values.buffer).equals(Buffer.from(p0.buffer))).toBe(true);
  });

  it('a damaged stored warm start makes the worker fit cold and say why, instead of failing', async () => {
    const req = request();
    const first = await new InlineFitter().fitAndForecast(req);
    const damaged = first.stored.slice();
    // Packed arrays end with the scaler's mean and scale (nFeatures each) after the weights.
    const nF = first.fitted.model.nFeatures;
    const weightAt = damaged.length - 8 * (2 * nF + 1);
    damaged.fill(0xff, weightAt, weightAt + 8); // the last weight becomes NaN
    const r = await pool.fitAndForecast({ ...req, warmStored: damaged });
    expect(r.warmStarted).toBe(false);
    expect(r.warmRejected?.code).toBe('BAD_FITTED');
    expect(r.warmRejected?.message).toMatch(/weights/);
    const cold = await pool.fitAndForecast(req);
    expect(Array.from(r.forecast.values)).toEqual(Array.from(cold.forecast.values));
  });

  it('an error in the worker keeps its code', async () => {
    const req = request();
    req.originIndex = req.target.values.length + 5;
    await expect(pool.fitAndForecast(req)).rejects.toMatchObject({ code: 'ORIGIN_OUT_OF_RANGE', hint: expect.stringMatching(/./), field: 'originIndex' });
  });
});
