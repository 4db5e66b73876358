import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { regularize, SeriesError, type Reading, type RegularizeOptions } from '../../../src/series/index.ts';

const HOUR = 3_600_000;
const START = Date.UTC(2026, 0, 5); // a Monday, 00:00 UTC

function opts(over: Partial<RegularizeOptions> = {}): RegularizeOptions {
  return { stepMs: HOUR, startMs: START, endMs: START + 48 * HOUR, aggregation: 'mean', duplicates: 'last', maxFillSteps: 0, series: 'oskaveld-north', ...over };
}

/** Same NaN pattern and values within a relative tolerance. */
function expectSameSeries(a: Float64Array, b: Float64Array, relTol = 0): void {
  expect(a.length).toBe(b.length);
  for (let i = 0; i < a.length; i++) {
    if (Number.isNaN(a[i])) expect(Number.isNaN(b[i]), `index ${i}`).toBe(true);
    else if (relTol === 0) expect(b[i], `index ${i}`).toBe(a[i]);
    else expect(Math.abs(b[i] - a[i]), `index ${i}`).toBeLessThanOrEqual(relTol * Math.max(1, Math.abs(a[i])));
  }
}

describe('regularize: buckets, duplicates, dropped values', () => {
  it('aggregates each bucket with mean, sum, last, max and min', () => {
    // bucket 0: readings at :10 (4), :40 (2), :20 (9) -> time order 4, 9, 2
    const rs: Reading[] = [
      { t: START + 10 * 60_000, v: 4 },
      { t: START + 40 * 60_000, v: 2 },
      { t: START + 20 * 60_000, v: 9 },
      { t: START + HOUR, v: 7 },
    ];
    const o = { endMs: START + 2 * HOUR };
    expect(Array.from(regularize(rs, opts({ ...o, aggregation: 'mean' })).values)).toEqual([5, 7]);
    expect(Array.from(regularize(rs, opts({ ...o, aggregation: 'sum' })).values)).toEqual([15, 7]);
    expect(Array.from(regularize(rs, opts({ ...o, aggregation: 'last' })).values)).toEqual([2, 7]); // latest in time (:40)
    expect(Array.from(regularize(rs, opts({ ...o, aggregation: 'max' })).values)).toEqual([9, 7]);
    expect(Array.from(regularize(rs, opts({ ...o, aggregation: 'min' })).values)).toEqual([2, 7]);
  });

  it("duplicates: 'last' keeps the last one in input order, 'mean' averages them", () => {
    const t = START + 5 * 60_000;
    const rs: Reading[] = [{ t, v: 1 }, { t, v: 2 }, { t, v: 6 }];
    const o = { endMs: START + HOUR };
    const last = regularize(rs, opts({ ...o, duplicates: 'last' }));
    expect(last.values[0]).toBe(6);
    expect(last.stats.duplicates).toBe(2);
    expect(regularize([...rs].reverse(), opts({ ...o, duplicates: 'last' })).values[0]).toBe(1);
    expect(regularize(rs, opts({ ...o, duplicates: 'mean' })).values[0]).toBe(3);
    // duplicates are merged before bucket aggregation: one point of 3 and one of 10 -> mean 6.5
    const mixed = [...rs, { t: t + 60_000, v: 10 }];
    expect(regularize(mixed, opts({ ...o, duplicates: 'mean', aggregation: 'mean' })).values[0]).toBe(6.5);
  });

  it('drops and counts non-finite and non-numeric values and bad timestamps; ignores out-of-range readings', () => {
    const good: Reading[] = [{ t: START, v: 1 }, { t: START + HOUR, v: 2 }];
    const bad = [
      { t: START + 2 * HOUR, v: NaN },
      { t: START + 2 * HOUR, v: Infinity },
      { t: START + 2 * HOUR, v: -Infinity },
      { t: START + 2 * HOUR, v: '3' },
      { t: START + 2 * HOUR, v: null },
      { t: START + 2 * HOUR },
      { t: 'yesterday', v: 3 },
      { t: NaN, v: 3 },
      null,
    ] as unknown as Reading[];
    const outside: Reading[] = [{ t: START - 1, v: 5 }, { t: START + 48 * HOUR, v: 5 }];
    const r = regularize([...good, ...bad, ...outside], opts());
    expect(r.stats).toEqual({ readingsIn: 13, dropped: 9, outOfRange: 2, duplicates: 0, filled: 0, missingSteps: 46 });
    expect(r.values[0]).toBe(1);
    expect(r.values[1]).toBe(2);
    expect(Number.isNaN(r.values[2])).toBe(true);
    expect(r.values.length).toBe(48);
  });

  it('rejects bad options with a SeriesError naming the option', () => {
    const cases: Array<[Partial<RegularizeOptions>, string]> = [
      [{ stepMs: 0 }, 'stepMs'],
      [{ stepMs: 1.5 }, 'stepMs'],
      [{ endMs: START - HOUR }, 'endMs'],
      [{ maxFillSteps: -1 }, 'maxFillSteps'],
      [{ aggregation: 'median' as never }, 'aggregation'],
      [{ duplicates: 'first' as never }, 'duplicates'],
    ];
    for (const [o, field] of cases) {
      const run = (): unknown => regularize([], opts(o));
      expect(run).toThrow(SeriesError);
      try {
        run();
      } catch (e) {
        expect((e as SeriesError).code).toBe('BAD_OPTIONS');
        expect((e as SeriesError).field).toBe(field);
        expect((e as SeriesError).series).toBe('oskaveld-north');
      }
    }
  });
});

// Readings on a 48-step hourly grid at arbitrary minutes; values on a 1/8 grid so sums are exact.
const readingArb = fc.record({
  step: fc.integer({ min: 0, max: 47 }),
  minute: fc.integer({ min: 0, max: 59 }),
  v: fc.integer({ min: -8000, max: 8000 }).map((k) => k / 8),
});

describe('regularize: order and duplicates do not matter (property)', () => {
  it('shuffling and duplicating readings yields the same regular series', () => {
    fc.assert(
      fc.property(
        fc.uniqueArray(readingArb, { selector: (r) => r.step * 60 + r.minute, maxLength: 80 }),
        fc.infiniteStream(fc.nat()),
        fc.array(fc.nat(), { maxLength: 30 }),
        fc.constantFrom<RegularizeOptions['aggregation']>('mean', 'sum', 'last', 'max', 'min'),
        fc.constantFrom<RegularizeOptions['duplicates']>('last', 'mean'),
        fc.integer({ min: 0, max: 4 }),
        (pts, rand, dupIdx, aggregation, duplicates, maxFillSteps) => {
          const readings = pts.map((p) => ({ t: START + p.step * HOUR + p.minute * 60_000, v: p.v }));
          const o = opts({ aggregation, duplicates, maxFillSteps });
          const ref = regularize(readings, o);
          // shuffle (Fisher-Yates driven by the stream) and append exact duplicates
          const shuffled = readings.slice();
          const it = rand[Symbol.iterator]();
          for (let i = shuffled.length - 1; i > 0; i--) {
            const j = it.next().value % (i + 1);
            [shuffled[i], shuffled[j]] = [shuffled[j], shuffled[i]];
          }
          const dups = readings.length === 0 ? [] : dupIdx.map((k) => ({ ...readings[k % readings.length] }));
          const other = regularize([...shuffled, ...dups], o);
          expectSameSeries(ref.values, other.values);
          expect(other.stats.duplicates).toBe(dups.length);
          expect(other.stats.filled).toBe(ref.stats.filled);
          expect(other.stats.missingSteps).toBe(ref.stats.missingSteps);
        },
      ),
      { numRuns: 300 },
    );
  });
});

describe('regularize: gap filling (property)', () => {
  it('fills interior gaps of at most maxFillSteps linearly and never spans a longer gap', () => {
    fc.assert(
      fc.property(
        fc.array(fc.option(fc.integer({ min: -1000, max: 1000 }), { nil: undefined, freq: 3 }), { minLength: 1, maxLength: 60 }),
        fc.integer({ min: 0, max: 6 }),
        (cells, maxFillSteps) => {
          const n = cells.length;
          const readings: Reading[] = [];
          cells.forEach((v, i) => {
            if (v !== undefined) readings.push({ t: START + i * HOUR, v });
          });
          const r = regularize(readings, opts({ endMs: START + n * HOUR, maxFillSteps }));
          let filled = 0;
          let missing = 0;
          let i = 0;
          while (i < n) {
            if (cells[i] !== undefined) {
              expect(r.values[i]).toBe(cells[i]);
              expect(r.filled![i]).toBe(0);
              i++;
              continue;
            }
            let e = i;
            while (e < n && cells[e] === undefined) e++;
            const interior = i > 0 && e < n;
            for (let p = i; p < e; p++) {
              if (interior && e - i <= maxFillSteps) {
                // linear interpolation between the neighbours: a + (b - a) * (p - i + 1) / (len + 1)
                const a = cells[i - 1]!;
                const b = cells[e]!;
                expect(r.values[p]).toBeCloseTo(a + ((b - a) * (p - i + 1)) / (e - i + 1), 9);
                expect(r.filled![p]).toBe(1);
                filled++;
              } else {
                expect(Number.isNaN(r.values[p]), `step ${p} of a gap of ${e - i}`).toBe(true);
                missing++;
              }
            }
            i = e;
          }
          expect(r.stats.filled).toBe(filled);
          expect(r.stats.missingSteps).toBe(missing);
          expect(r.stats.readingsIn).toBe(readings.length);
        },
      ),
      { numRuns: 400 },
    );
  });

  it('a gap one step longer than maxFillSteps stays entirely missing', () => {
    const readings: Reading[] = [{ t: START, v: 10 }, { t: START + 4 * HOUR, v: 50 }];
    const r3 = regularize(readings, opts({ endMs: START + 5 * HOUR, maxFillSteps: 3 }));
    expect(Array.from(r3.values)).toEqual([10, 20, 30, 40, 50]);
    const r2 = regularize(readings, opts({ endMs: START + 5 * HOUR, maxFillSteps: 2 }));
    expect(Array.from(r2.values).map((x) => (Number.isNaN(x) ? null : x))).toEqual([10, null, null, null, 50]);
    expect(r2.stats.filled).toBe(0);
    expect(r2.stats.missingSteps).toBe(3);
  });
});
