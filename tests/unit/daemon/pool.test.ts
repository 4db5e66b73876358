import { afterAll, describe, expect, it } from 'vitest';
import { InlineFitter, PoolFitter } from '../../../src/daemon/pool.ts';
import { regularize, lastValueIndex } from '../../../src/series/index.ts';
import type { FitRequest } from '../../../src/daemon/ports.ts';
import { HOUR, resolved, syntheticLoad } from './fakes.ts';

const END = Date.UTC(2026, 10, 30);
const pool = new PoolFitter({ threads: 1 });
afterAll(async () => {
  await pool.stop();
});

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
    expect(b.fitted.model).toEqual(a.fitted.model);
    expect(b.holdout?.residualsByLead).toEqual(a.holdout?.residualsByLead);
    expect(b.fitMs).toBeGreaterThan(0);
  });

  it('an error in the worker keeps its code', async () => {
    const req = request();
    req.originIndex = req.target.values.length + 5;
    await expect(pool.fitAndForecast(req)).rejects.toMatchObject({ code: 'ORIGIN_OUT_OF_RANGE', hint: expect.stringMatching(/./), field: 'originIndex' });
  });
});
