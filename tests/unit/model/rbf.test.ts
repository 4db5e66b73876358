import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { Matrix, solve as mlSolve } from 'ml-matrix';
import { DEFAULT_FIT_OPTIONS, fitRbf, ModelError, parseModel, predictRbf, serializeModel } from '../../../src/model/index.ts';
import { logGammaGradient } from '../../../src/model/rbf.ts';
import { dist2All } from '../../../src/model/distance.ts';
import type { Dense, FitOptions, RbfModel } from '../../../src/model/types.ts';
import { dense, lagSamples, mse, noise, sliceRows } from './helpers.ts';

const opts = (o: Partial<FitOptions> = {}): FitOptions => ({ ...DEFAULT_FIT_OPTIONS, ...o });

/** A smooth nonlinear series with a daily-like cycle and noise (invented, test data only). */
function wavySeries(n: number, seed: number, amp = 3, noiseSd = 0.3): number[] {
  const z = noise(seed);
  return Array.from({ length: n }, (_, t) => 10 + amp * Math.sin((2 * Math.PI * t) / 24) + 0.5 * Math.sin((2 * Math.PI * t) / 24) ** 3 + noiseSd * z());
}

function errorOf(f: () => unknown): ModelError {
  try {
    f();
  } catch (e) {
    if (e instanceof ModelError) return e;
    throw e;
  }
  throw new Error('expected a ModelError');
}

describe('interpolation (Micchelli 1986: Gaussian kernel matrices of distinct points are positive definite)', () => {
  it('one centre on every sample and lambda = 0 reproduces the training targets', () => {
    const z = noise(7);
    const pts = Array.from({ length: 40 }, () => [2 * z(), 2 * z(), z()]);
    const x = dense(pts);
    const y = dense(pts.map(([a, b, c]) => [Math.sin(a) + b * c, Math.cos(b) - a, a * a]));
    const { model, report } = fitRbf(x, y, opts({ nCentres: 40, ridge: 0, bias: false, linearTerms: false, widthIterations: 0, validationFraction: 0, restarts: 1 }));
    expect(report.ridgeRaised).toBe(false);
    // Every sample became a centre.
    const c = model.centres;
    for (const p of pts) expect(Array.from({ length: 40 }, (_, k) => k).some((k) => p.every((v, j) => c[k * 3 + j] === v))).toBe(true);
    const pred = predictRbf(model, x);
    for (let i = 0; i < y.data.length; i++) expect(pred.y.data[i]).toBeCloseTo(y.data[i], 7);
    expect(Array.from(pred.novelty).every((v) => Math.abs(v - 1) < 1e-12)).toBe(true);
  });
});

describe('width gradient', () => {
  const { x, y } = lagSamples(wavySeries(260, 3), 4, 3);
  /** MSE of the model with other widths (weights fixed), through the public predictor. */
  const mseWith = (model: RbfModel, g: ArrayLike<number>): number => mse(predictRbf({ ...model, gammas: Array.from(g) }, x).y.data, y.data);
  /** The analytic gradient at widths g, from the residuals and activations of that model. */
  const analytic = (model: RbfModel, g: Float64Array): Float64Array => {
    const K = model.nCentres;
    const d2 = dist2All(x.data, x.rows, x.cols, Float64Array.from(model.centres), K);
    const e = d2.map((v, i) => Math.exp(-g[i % K] * v));
    const pred = predictRbf({ ...model, gammas: Array.from(g) }, x).y.data;
    const res = y.data.map((v, i) => v - pred[i]);
    const wGauss = Float64Array.from(model.weights.slice(y.cols, (1 + K) * y.cols));
    return logGammaGradient(res, e, d2, x.rows, K, g, wGauss, y.cols);
  };

  it('analytic d MSE / d log gamma_k agrees with central finite differences (per-centre)', () => {
    const { model } = fitRbf(x, y, opts({ nCentres: 6, widthMode: 'per-centre', widthIterations: 0, validationFraction: 0 }));
    // Move the widths away from the fitted ones so the gradient is not near zero.
    const gam = Float64Array.from(model.gammas, (v, k) => v * (1.5 + 0.2 * k));
    const g = analytic(model, gam);
    const h = 1e-5;
    for (let k = 0; k < model.nCentres; k++) {
      const up = gam.slice();
      const dn = gam.slice();
      up[k] *= Math.exp(h);
      dn[k] *= Math.exp(-h);
      const fd = (mseWith(model, up) - mseWith(model, dn)) / (2 * h);
      expect(Math.abs(fd)).toBeGreaterThan(1e-6);
      expect(Math.abs(g[k] - fd)).toBeLessThan(1e-6 * Math.abs(fd) + 1e-12);
    }
  });

  it('shared width: the derivative is the sum over centres', () => {
    const { model } = fitRbf(x, y, opts({ nCentres: 6, widthMode: 'shared', widthIterations: 0, validationFraction: 0 }));
    const gam = Float64Array.from(model.gammas, (v) => v * 1.7);
    const total = analytic(model, gam).reduce((a, b) => a + b, 0);
    const h = 1e-5;
    const fd = (mseWith(model, gam.map((v) => v * Math.exp(h))) - mseWith(model, gam.map((v) => v * Math.exp(-h)))) / (2 * h);
    expect(Math.abs(fd)).toBeGreaterThan(1e-6);
    expect(Math.abs(total - fd)).toBeLessThan(1e-6 * Math.abs(fd) + 1e-12);
  });
});

describe('alternating updates and determinism (fast-check)', () => {
  const cases = fc.record({
    seed: fc.integer({ min: 0, max: 10000 }),
    amp: fc.double({ min: 0.5, max: 5, noNaN: true }),
    noiseSd: fc.double({ min: 0.05, max: 1, noNaN: true }),
    k: fc.integer({ min: 2, max: 10 }),
    mode: fc.constantFrom<'shared' | 'per-centre'>('shared', 'per-centre'),
    linear: fc.boolean(),
  });

  it('never increase the validation error, and the reported error is the returned model’s error on the tail', () => {
    fc.assert(
      fc.property(cases, ({ seed, amp, noiseSd, k, mode, linear }) => {
        const { x, y } = lagSamples(wavySeries(200, seed, amp, noiseSd), 5, 4);
        const { model, report } = fitRbf(x, y, opts({ nCentres: k, widthMode: mode, linearTerms: linear, widthIterations: 6, widthTol: 0, validationFraction: 0.25, refitAllRows: false, seed, restarts: 1 }));
        const acc = report.history.filter((e) => e.accepted);
        for (let i = 1; i < acc.length; i++) expect(acc[i].validationMse).toBeLessThanOrEqual(acc[i - 1].validationMse);
        expect(report.validationMse).toBeLessThanOrEqual(report.history[0].validationMse);
        const nTrain = report.nTrainRows;
        const pred = predictRbf(model, sliceRows(x, nTrain, x.rows));
        const tail = sliceRows(y, nTrain, y.rows);
        expect(mse(pred.y.data, tail.data)).toBeCloseTo(report.validationMse, 8);
      }),
      { numRuns: 30 },
    );
  });

  it('the same seed gives identical models', () => {
    fc.assert(
      fc.property(cases, ({ seed, amp, noiseSd, k, mode, linear }) => {
        const { x, y } = lagSamples(wavySeries(150, seed, amp, noiseSd), 4, 3);
        const o = opts({ nCentres: k, widthMode: mode, linearTerms: linear, seed, subsampleRows: seed % 2 ? 80 : 0 });
        expect(serializeModel(fitRbf(x, y, o).model)).toBe(serializeModel(fitRbf(x, y, o).model));
      }),
      { numRuns: 20 },
    );
  });
});

describe('model as data', () => {
  it('JSON round trip gives bit-identical predictions and keeps meta', () => {
    const { x, y } = lagSamples(wavySeries(300, 11), 6, 5);
    const { model } = fitRbf(x, y, opts({ nCentres: 12 }));
    model.meta = { trainedFromMs: 1_700_000_000_000, series: 'oskaveld-north' };
    const back = parseModel(serializeModel(model));
    expect(back).toEqual(model);
    const a = predictRbf(model, x);
    const b = predictRbf(back, x);
    for (let i = 0; i < a.y.data.length; i++) expect(Object.is(a.y.data[i], b.y.data[i])).toBe(true);
    for (let i = 0; i < a.novelty.length; i++) expect(Object.is(a.novelty[i], b.novelty[i])).toBe(true);
  });

  it('parseModel rejects damaged models naming the field', () => {
    const { x, y } = lagSamples(wavySeries(120, 2), 3, 2);
    const m = fitRbf(x, y, opts({ nCentres: 4 })).model;
    const bad = (patch: Partial<RbfModel> | string): ModelError =>
      errorOf(() => parseModel(typeof patch === 'string' ? patch : JSON.stringify({ ...m, ...patch })));
    expect(bad('{"version":').code).toBe('BAD_MODEL');
    expect(bad({ gammas: m.gammas.slice(1) }).detail.where).toBe('model.gammas');
    expect(bad({ gammas: m.gammas.map((g, i) => (i === 2 ? -g : g)) }).detail.where).toBe('model.gammas[2]');
    expect(bad({ weights: [...m.weights.slice(1), null as unknown as number] }).detail.where).toMatch(/^model.weights\[/);
    expect(bad({ version: 2 as 1 }).detail.where).toBe('model.version');
    expect(bad({ widthMode: 'wide' as 'shared' }).detail.where).toBe('model.widthMode');
  });
});

describe('linear terms on a smooth, almost linear series', () => {
  it('the network with linear terms is no worse than plain ridge linear regression (ml-matrix) on later data', () => {
    const z = noise(5);
    const v = Array.from({ length: 560 }, (_, t) => 40 + 0.25 * t + 1.5 * Math.sin((2 * Math.PI * t) / 300) + 0.2 * z());
    const { x, y } = lagSamples(v, 6, 4);
    const nFit = 400;
    const xf = sliceRows(x, 0, nFit), yf = sliceRows(y, 0, nFit);
    const xt = sliceRows(x, nFit, x.rows), yt = sliceRows(y, nFit, y.rows);
    // Reference: ordinary least squares with intercept by ml-matrix (the ridge here is 0).
    const design = (m: Dense) => new Matrix(Array.from({ length: m.rows }, (_, i) => [1, ...m.data.slice(i * m.cols, (i + 1) * m.cols)]));
    const coef = mlSolve(design(xf), new Matrix(Array.from({ length: yf.rows }, (_, i) => Array.from(yf.data.slice(i * 4, i * 4 + 4)))));
    const linPred = Float64Array.from(design(xt).mmul(coef).to1DArray());
    const linMse = mse(linPred, yt.data);
    const withLin = predictRbf(fitRbf(xf, yf, opts({ nCentres: 16, linearTerms: true })).model, xt);
    const pure = predictRbf(fitRbf(xf, yf, opts({ nCentres: 16, linearTerms: false })).model, xt);
    const rbfMse = mse(withLin.y.data, yt.data);
    expect(rbfMse).toBeLessThanOrEqual(linMse * 1.01);
    // Without linear terms the network cannot follow the trend beyond the training range.
    expect(mse(pure.y.data, yt.data)).toBeGreaterThan(10 * linMse);
    // The later inputs lie beyond the training data: novelty shows it.
    expect(Math.max(...withLin.novelty.slice(-20))).toBeLessThan(0.05);
  });
});

describe('warm start', () => {
  it('a refit on a window shifted by one day reuses centres and widths and fits as well', () => {
    const v = wavySeries(700, 21);
    const a = lagSamples(v, 8, 24, 8, 608);
    const b = lagSamples(v, 8, 24, 32, 632);
    const o = opts({ nCentres: 16 });
    const first = fitRbf(a.x, a.y, o).model;
    const cold = fitRbf(b.x, b.y, o);
    const warm = fitRbf(b.x, b.y, { ...o, warmStart: first });
    expect(warm.report.warmStarted).toBe(true);
    expect(cold.report.warmStarted).toBe(false);
    expect(warm.report.kmeansPasses).toBeLessThanOrEqual(DEFAULT_FIT_OPTIONS.warmMaxPasses);
    expect(warm.report.validationMse).toBeLessThan(cold.report.validationMse * 1.05);
    // A model of other dimensions is ignored, not misused.
    const other = fitRbf(a.x, a.y, opts({ nCentres: 8 })).model;
    expect(fitRbf(b.x, b.y, { ...o, warmStart: other }).report.warmStarted).toBe(false);
  });

  it('after the alternation converges the widths rest for 1, 2, 4 ... warm refits (at most warmWidthRest), then are tried again', () => {
    const v = wavySeries(1400, 5);
    const o = opts({ nCentres: 12, warmWidthRest: 4 });
    // A chain of daily refits on a window sliding one day at a time.
    const windowAt = (day: number) => lagSamples(v, 8, 24, 8 + 24 * day, 608 + 24 * day);
    let prev = fitRbf(windowAt(0).x, windowAt(0).y, o);
    const chain: Array<{ rested: boolean; rest: number; length: number; steps: number }> = [];
    for (let day = 1; day <= 20; day++) {
      const w = windowAt(day);
      const r = fitRbf(w.x, w.y, { ...o, warmStart: prev.model });
      chain.push({ rested: r.report.widthsRested, rest: r.model.widthRest ?? 0, length: r.model.widthRestLength ?? 0, steps: r.report.history.length - 1 });
      // A resting refit keeps the widths exactly and runs no width step.
      if (r.report.widthsRested) {
        expect(r.model.gammas).toEqual(prev.model.gammas);
        expect(r.report.history.length).toBe(1);
      }
      // Every refit, resting or not, still has finite validation error no worse than its start.
      expect(r.report.history.at(-1)!.validationMse).toBeLessThanOrEqual(r.report.history[0].validationMse);
      prev = r;
    }
    // The cold fit's alternation converged: its first warm refit rests.
    expect(chain[0].rested).toBe(true);
    // Rest lengths never exceed the bound, and a resting refit counts its rest down by one.
    for (const c of chain) expect(c.length).toBeLessThanOrEqual(4);
    for (let i = 1; i < chain.length; i++) if (chain[i].rested) expect(chain[i].rest).toBe(chain[i - 1].rest - 1);
    // Width steps are still tried between rests, and rests grow while the alternation keeps converging.
    expect(chain.some((c) => !c.rested && c.steps >= 1)).toBe(true);
    expect(Math.max(...chain.map((c) => c.length))).toBeGreaterThanOrEqual(2);
    // warmWidthRest: 0 turns the rest off: every warm refit tries a width step.
    const off = fitRbf(windowAt(1).x, windowAt(1).y, { ...o, warmWidthRest: 0, warmStart: fitRbf(windowAt(0).x, windowAt(0).y, o).model });
    expect(off.report.widthsRested).toBe(false);
    expect(off.report.history.length).toBeGreaterThanOrEqual(2);
  });
});

describe('bad input', () => {
  const { x, y } = lagSamples(wavySeries(100, 1), 3, 2);

  it('NaN in targets names y, row and column', () => {
    const yb = { ...y, data: y.data.slice() };
    yb.data[7 * 2 + 1] = Number.NaN;
    const e = errorOf(() => fitRbf(x, yb, opts({ nCentres: 4 })));
    expect(e.code).toBe('NON_FINITE');
    expect(e.detail).toMatchObject({ where: 'y', row: 7, col: 1 });
    expect(e.message).toMatch(/^NON_FINITE y row=7 col=1:/);
  });

  it('mismatched rows, too many centres and unknown options are errors', () => {
    expect(errorOf(() => fitRbf(x, sliceRows(y, 0, 10), opts({ nCentres: 4 }))).code).toBe('DIMENSION_MISMATCH');
    expect(errorOf(() => fitRbf(sliceRows(x, 0, 5), sliceRows(y, 0, 5), opts({ nCentres: 6 }))).code).toBe('TOO_FEW_SAMPLES');
    expect(errorOf(() => fitRbf(x, y, opts({ widthMode: 'wide' as 'shared' }))).detail.where).toBe('opts.widthMode');
    expect(errorOf(() => fitRbf(x, y, opts({ validationFraction: 1.5 }))).detail.where).toBe('opts.validationFraction');
    const m = fitRbf(x, y, opts({ nCentres: 4 })).model;
    expect(errorOf(() => predictRbf(m, sliceRows(lagSamples(wavySeries(50, 1), 4, 2).x, 0, 3))).code).toBe('DIMENSION_MISMATCH');
    const xn = { ...x, data: x.data.slice() };
    xn.data[5] = Number.POSITIVE_INFINITY;
    expect(errorOf(() => predictRbf(m, xn)).detail).toMatchObject({ where: 'x', row: 1, col: 2 });
    xn.data[5] = 1e200; // finite, but its square overflows
    expect(errorOf(() => predictRbf(m, xn)).code).toBe('OUT_OF_RANGE');
  });

  it('a constant feature is handled: finite forecasts, zero linear weight, even with ridge 0', () => {
    const xc = new Float64Array(x.rows * 4);
    for (let i = 0; i < x.rows; i++) {
      xc.set(x.data.subarray(i * 3, i * 3 + 3), i * 4);
      xc[i * 4 + 3] = 2.5; // e.g. a holiday flag that never fires in the window
    }
    const xd = { data: xc, rows: x.rows, cols: 4 };
    for (const ridge of [0, 1e-6]) {
      const { model, report } = fitRbf(xd, y, opts({ nCentres: 5, ridge }));
      expect(Number.isFinite(report.trainMse)).toBe(true);
      const wRow = (1 + 5 + 3) * 2;
      expect(model.weights.slice(wRow, wRow + 2)).toEqual([0, 0]);
      expect(Array.from(predictRbf(model, xd).y.data).every(Number.isFinite)).toBe(true);
    }
  });

  it('duplicate rows (fewer distinct points than centres) still give finite forecasts', () => {
    const xs = dense(Array.from({ length: 30 }, (_, i) => [i % 3, (i % 3) * 2]));
    const ys = dense(Array.from({ length: 30 }, (_, i) => [i % 3]));
    const { model, report } = fitRbf(xs, ys, opts({ nCentres: 6, ridge: 0, linearTerms: false }));
    expect(report.ridgeRaised).toBe(true); // raised automatically for the singular system
    const p = predictRbf(model, xs);
    for (let i = 0; i < 30; i++) expect(p.y.data[i]).toBeCloseTo(i % 3, 4);
  });
});
