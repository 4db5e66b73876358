/**
 * The WebAssembly SIMD kernels against the plain TypeScript loops they replace (same formulas;
 * the kernels sum each dot product in the same order, so most results agree bit for bit).
 */
import { afterEach, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { dist2Scalar, rowNorms2, simdKernels, useKernels } from '../../../src/model/distance.ts';
import { loadSimdKernels } from '../../../src/model/wasm/kernels.ts';
import { crossProduct, gram } from '../../../src/model/blas.ts';
import { choleskyScaled, choleskySolve } from '../../../src/model/linalg.ts';
import { DEFAULT_FIT_OPTIONS, fitRbf, kmeans, predictRbf } from '../../../src/model/index.ts';
import { lagSamples, noise } from './helpers.ts';

const simd = loadSimdKernels();

function randomMatrix(rows: number, cols: number, seed: number): Float64Array {
  const z = noise(seed);
  return Float64Array.from({ length: rows * cols }, () => z());
}

/** Rows x (m x k), centres c (n x k), their norms and the scalar kernel's distances. */
function distanceFixture(m: number, n: number, k: number, seed: number, centreSeed: number) {
  const x = randomMatrix(m, k, seed);
  const c = randomMatrix(n, k, seed + centreSeed);
  const x2 = rowNorms2(x, m, k);
  const c2 = rowNorms2(c, n, k);
  const ref = new Float64Array(m * n);
  dist2Scalar(x, x2, m, k, c, c2, n, ref);
  return { x, c, x2, c2, ref };
}

afterEach(() => useKernels('auto'));

describe('SIMD kernels', () => {
  it('are available on this runtime (Node 20 has WebAssembly SIMD)', () => {
    expect(simd).not.toBeNull();
    expect(simdKernels()).not.toBeNull();
  });

  const shapes = fc.record({ m: fc.integer({ min: 1, max: 37 }), n: fc.integer({ min: 1, max: 19 }), k: fc.integer({ min: 1, max: 23 }), seed: fc.integer({ min: 0, max: 1e6 }) });

  it('gemm equals the plain triple loop for odd and even shapes', () => {
    fc.assert(
      fc.property(shapes, ({ m, n, k, seed }) => {
        const a = randomMatrix(m, k, seed);
        const b = randomMatrix(k, n, seed + 1);
        const out = simd!.gemm(a, m, k, b, n, new Float64Array(m * n));
        for (let i = 0; i < m; i++) {
          for (let j = 0; j < n; j++) {
            let s = 0;
            for (let l = 0; l < k; l++) s += a[i * k + l] * b[l * n + j];
            expect(out[i * n + j]).toBe(s);
          }
        }
      }),
      { numRuns: 60 },
    );
  });

  it('dist2 equals the scalar kernel, and the pad centre of odd counts never leaks', () => {
    fc.assert(
      fc.property(shapes, ({ m, n, k, seed }) => {
        const { x, c, x2, c2, ref } = distanceFixture(m, n, k, seed, 7);
        const out = simd!.dist2(x, x2, m, c, c2, n, k, new Float64Array(m * n));
        expect(Array.from(out)).toEqual(Array.from(ref));
        // Resident rows: full pass and k-means++ step (the Lloyd passes: their own test).
        const res = simd!.resident(x, x2, m, k);
        expect(Array.from(res.dist2(c, c2, n, new Float64Array(m * n)))).toEqual(Array.from(ref));
        // Mean feature variance: the plain column loops, bit for bit (each column sums in row order).
        let varTotal = 0;
        for (let j = 0; j < k; j++) {
          let mean = 0;
          for (let i = 0; i < m; i++) mean += x[i * k + j];
          mean /= m;
          let v = 0;
          for (let i = 0; i < m; i++) v += (x[i * k + j] - mean) * (x[i * k + j] - mean);
          varTotal += v / m;
        }
        expect(res.meanVariance()).toBe(varTotal / k);
        const step = res.seedUpdate(c.subarray(0, k), true);
        const step2 = res.seedUpdate(c.subarray(k * (n - 1), k * n), false);
        let total = 0;
        for (let i = 0; i < m; i++) {
          let a = 0;
          let b = 0;
          for (let l = 0; l < k; l++) {
            a += (x[i * k + l] - c[l]) ** 2;
            b += (x[i * k + l] - c[(n - 1) * k + l]) ** 2;
          }
          expect(step2.minD2[i]).toBeCloseTo(Math.min(a, b), 10);
          total += Math.min(a, b);
        }
        expect(step.total).toBeGreaterThanOrEqual(step2.total);
        expect(step2.total).toBeCloseTo(total, 8);
      }),
      { numRuns: 60 },
    );
  });

  it('lloydWork: a full pass finds the nearest and second nearest centre of every row and the member sums; exactOwn gives the difference-form distances', () => {
    fc.assert(
      fc.property(shapes, ({ m, n, k, seed }) => {
        const { x, c, x2, c2, ref } = distanceFixture(m, n, k, seed, 5);
        const work = simd!.resident(x, x2, m, k).lloydWork(n);
        work.reset();
        const changed = work.pass(c, c2, new Float64Array(n), 0, 0, 0, -1, 0, 0);
        expect(changed).toBe(m); // every row starts without a label
        const v = work.views();
        const sums = new Float64Array(n * k);
        const counts = new Int32Array(n);
        for (let i = 0; i < m; i++) {
          const row = Array.from(ref.subarray(i * n, (i + 1) * n));
          const best = Math.min(...row);
          const label = row.indexOf(best);
          expect(v.labels[i]).toBe(label);
          expect(v.own[i]).toBe(best);
          expect(v.upper[i]).toBe(Math.sqrt(best));
          const rest = row.filter((_, j) => j !== label);
          expect(v.lower[i]).toBe(rest.length ? Math.sqrt(Math.min(...rest)) : Infinity);
          counts[label]++;
          for (let j = 0; j < k; j++) sums[label * k + j] += x[i * k + j];
        }
        expect(Array.from(v.counts)).toEqual(Array.from(counts));
        // Same additions in the same row order: the sums agree exactly.
        expect(Array.from(v.sums)).toEqual(Array.from(sums));
        work.exactOwn(c);
        const e = work.views();
        for (let i = 0; i < m; i++) {
          let s2 = 0;
          for (let j = 0; j < k; j++) s2 += (x[i * k + j] - c[e.labels[i] * k + j]) ** 2;
          expect(e.own[i]).toBeCloseTo(s2, 10);
          expect(e.upper[i]).toBe(Math.sqrt(e.own[i]));
        }
      }),
      { numRuns: 60 },
    );
  });

  it('lloydWork: after the centres move, the pruned pass (mode 1) gives the same labels, sums and counts as the plain pass (mode 2)', () => {
    fc.assert(
      fc.property(shapes, fc.double({ min: 0, max: 0.5, noNaN: true }), ({ m, n, k, seed }, step) => {
        const { x, c, x2, c2 } = distanceFixture(m, n, k, seed, 5);
        const z = noise(seed + 11);
        const c1 = Float64Array.from(c, (v) => v + step * z());
        const c12 = rowNorms2(c1, n, k);
        const moved = new Float64Array(n);
        for (let a = 0; a < n; a++) {
          let s2 = 0;
          for (let j = 0; j < k; j++) s2 += (c1[a * k + j] - c[a * k + j]) ** 2;
          moved[a] = Math.sqrt(s2);
        }
        let m1 = 0;
        let m2 = 0;
        let mk = -1;
        for (let a = 0; a < n; a++) {
          if (moved[a] > m1) {
            m2 = m1;
            m1 = moved[a];
            mk = a;
          } else if (moved[a] > m2) m2 = moved[a];
        }
        const slackUnit = 8 * (k + 2) * 2 ** -52;
        const slack0 = slackUnit * Math.max(...c12);
        const run = (mode: 1 | 2) => {
          const work = simd!.resident(x, x2, m, k).lloydWork(n);
          work.reset();
          work.pass(c, c2, new Float64Array(n), 0, 0, 0, -1, 0, 0);
          const changed = work.pass(c1, c12, moved, mode, m1, m2, mk, slack0, slackUnit);
          const v = work.views();
          return { changed, labels: Array.from(v.labels), sums: Array.from(v.sums), counts: Array.from(v.counts) };
        };
        expect(run(1)).toEqual(run(2));
      }),
      { numRuns: 80 },
    );
  });

  it('crossRows equals the plain Gram and cross products over a row range', () => {
    fc.assert(
      fc.property(fc.record({ n: fc.integer({ min: 3, max: 300 }), p: fc.integer({ min: 1, max: 13 }), h: fc.integer({ min: 1, max: 7 }), seed: fc.integer({ min: 0, max: 1e6 }) }), ({ n, p, h, seed }) => {
        const a = randomMatrix(n, p, seed);
        const r = randomMatrix(n, h, seed + 3);
        const r0 = Math.floor(n / 3);
        const g = gram(a, p, r0, n);
        const b = crossProduct(a, p, r, h, r0, n);
        const out = simd!.crossRows(a, p, r, h, r0, n, true, new Float64Array(p * (p + h)));
        for (let i = 0; i < p; i++) {
          for (let j = 0; j < p; j++) expect(out[i * (p + h) + j]).toBeCloseTo(g[i * p + j], 10);
          for (let c = 0; c < h; c++) expect(out[i * (p + h) + p + c]).toBeCloseTo(b[i * h + c], 10);
        }
      }),
      { numRuns: 40 },
    );
  });
  it('cholesky and cholSolve agree with the scalar loops (factor to rounding, solve bit for bit from the same factor)', () => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 41 }), fc.integer({ min: 1, max: 27 }), fc.integer({ min: 0, max: 1e6 }), (p, h, seed) => {
        // A well-conditioned SPD matrix G = A^T A + p I and a right-hand side.
        const a = randomMatrix(2 * p + 3, p, seed);
        const g = gram(a, p, 0, 2 * p + 3);
        for (let i = 0; i < p; i++) g[i * p + i] += p;
        const b = randomMatrix(p, h, seed + 3);
        const fSimd = choleskyScaled(g, p, 0)!;
        useKernels('js');
        const fJs = choleskyScaled(g, p, 0)!;
        const xJs = choleskySolve(fJs, b, h);
        useKernels('auto');
        for (let i = 0; i < p; i++) {
          for (let j = 0; j < p; j++) {
            if (j > i) expect(fSimd.lower[i * p + j]).toBe(0);
            else expect(fSimd.lower[i * p + j]).toBeCloseTo(fJs.lower[i * p + j], 12);
          }
        }
        // Same factor in, same operation order: the SIMD triangular solves equal the scalar ones exactly.
        expect(Array.from(choleskySolve(fJs, b, h))).toEqual(Array.from(xJs));
        // And the solution solves the system.
        const x = choleskySolve(fSimd, b, h);
        for (let i = 0; i < p; i++) {
          for (let c = 0; c < h; c++) {
            let s = 0;
            for (let j = 0; j < p; j++) s += g[i * p + j] * x[j * h + c];
            expect(s).toBeCloseTo(b[i * h + c], 9);
          }
        }
      }),
      { numRuns: 40 },
    );
  });

  it('expNeg is within 2 ulp of Math.exp over the activation range, 0 where Math.exp underflows, for odd and even widths', () => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 9 }), fc.integer({ min: 1, max: 13 }), fc.integer({ min: 0, max: 1e6 }), (m, k, seed) => {
        const z = noise(seed);
        const g = Float64Array.from({ length: k }, () => 0.05 + Math.abs(z()) * 3);
        // Squared distances from 0 to far beyond the underflow of e^(-g d) (g d up to ~900).
        const d = Float64Array.from({ length: m * k }, (_, i) => (i % 5 === 0 ? 0 : Math.abs(z()) * 10 ** ((i % 4) - 1) * 30));
        const out = simd!.expNeg(g, d, m, k, new Float64Array(m * k));
        for (let i = 0; i < m * k; i++) {
          const ref = Math.exp(-g[i % k] * d[i]);
          if (ref < 2.3e-308) expect(out[i]).toBeLessThanOrEqual(2 * ref + 5e-324);
          else expect(Math.abs(out[i] - ref)).toBeLessThanOrEqual(2 * Number.EPSILON * ref);
        }
      }),
      { numRuns: 60 },
    );
    const at = (x: number): number => simd!.expNeg(Float64Array.of(1), Float64Array.of(x), 1, 1, new Float64Array(1))[0];
    expect(at(0)).toBe(1);
    expect(at(746)).toBe(0);
    expect(at(Infinity)).toBe(0);
  });

  it('cholesky reports an indefinite matrix as no factor, like the scalar loops', () => {
    const g = Float64Array.from([4, 2, 0, 2, 1, 0, 0, 0, 3]); // rank-deficient leading 2 x 2 block
    expect(choleskyScaled(g, 3, 0)).toBeNull();
    useKernels('js');
    expect(choleskyScaled(g, 3, 0)).toBeNull();
  });
});

describe('results do not depend on the kernels', () => {
  it('k-means gives the same labels and centres with the SIMD and the scalar kernels', () => {
    const x = { data: randomMatrix(700, 9, 4), rows: 700, cols: 9 };
    const o = { nCentres: 13, restarts: 2, maxPasses: 100, tol: 0, seed: 9 };
    const a = kmeans(x, o);
    useKernels('js');
    const b = kmeans(x, o);
    expect(Array.from(b.labels)).toEqual(Array.from(a.labels));
    for (let i = 0; i < a.centres.data.length; i++) expect(b.centres.data[i]).toBeCloseTo(a.centres.data[i], 11);
    expect(b.passes).toBe(a.passes);
  });

  it('a fit gives the same forecasts with the SIMD and the scalar kernels', () => {
    const z = noise(12);
    const v = Array.from({ length: 400 }, (_, t) => 5 + 2 * Math.sin((2 * Math.PI * t) / 24) + 0.3 * z());
    const { x, y } = lagSamples(v, 7, 6);
    const o = { ...DEFAULT_FIT_OPTIONS, nCentres: 9 };
    const a = fitRbf(x, y, o);
    useKernels('js');
    const b = fitRbf(x, y, o);
    expect(b.report.history.length).toBe(a.report.history.length);
    const pa = predictRbf(a.model, x).y.data;
    const pb = predictRbf(b.model, x).y.data;
    for (let i = 0; i < pa.length; i++) expect(pb[i]).toBeCloseTo(pa[i], 8);
  });
});

describe('built module', () => {
  it('the embedded bytes are what src/model/wasm/build.ts produces from its source', async () => {
    const { buildKernels } = await import('../../../src/model/wasm/build.ts');
    const { KERNELS_WASM_BASE64 } = await import('../../../src/model/wasm/kernels.wasm.ts');
    const { bytes } = await buildKernels();
    expect(Buffer.from(bytes).toString('base64')).toBe(KERNELS_WASM_BASE64);
  });
});
