import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { Backoff } from '../../../src/store/influx/backoff.ts';

describe('Backoff (store writes)', () => {
  it('doubles from initialMs and stops at maxMs when jitter is off', () => {
    const b = new Backoff({ initialMs: 100, maxMs: 1_000, jitter: 0 });
    expect([1, 2, 3, 4, 5, 6, 50].map((a) => b.nextDelayMs(a))).toEqual([100, 200, 400, 800, 1_000, 1_000, 1_000]);
  });

  it('counts attempts itself when called without an argument, and reset() starts over', () => {
    const b = new Backoff({ initialMs: 50, maxMs: 10_000, factor: 3, jitter: 0 });
    expect([b.nextDelayMs(), b.nextDelayMs(), b.nextDelayMs()]).toEqual([50, 150, 450]);
    expect(b.attempt).toBe(3);
    b.reset();
    expect(b.attempt).toBe(0);
    expect(b.nextDelayMs()).toBe(50);
  });

  it('jitter takes off at most the jitter fraction, using the injected random source', () => {
    const b = new Backoff({ initialMs: 1_000, maxMs: 8_000, jitter: 0.2, random: () => 0.5 });
    expect(b.nextDelayMs(1)).toBeCloseTo(900, 9);
    expect(b.nextDelayMs(4)).toBeCloseTo(7_200, 9);
    const none = new Backoff({ initialMs: 1_000, maxMs: 8_000, jitter: 0.2, random: () => 0 });
    expect(none.nextDelayMs(2)).toBe(2_000);
  });

  it('every delay lies in [(1 - jitter) * capped, capped] and never above maxMs', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 10_000 }),
        fc.integer({ min: 1, max: 100 }),
        fc.double({ min: 0, max: 1, noNaN: true }),
        fc.double({ min: 0, max: 0.9999999, noNaN: true }),
        fc.integer({ min: 1, max: 5_000 }),
        (initialMs, capFactor, jitter, u, attempt) => {
          const maxMs = initialMs * capFactor;
          const b = new Backoff({ initialMs, maxMs, jitter, random: () => u });
          const d = b.nextDelayMs(attempt);
          const capped = Math.min(maxMs, initialMs * 2 ** Math.min(attempt - 1, 64));
          return d <= maxMs && d <= capped + 1e-9 && d >= (1 - jitter) * capped - 1e-9 && Number.isFinite(d);
        },
      ),
    );
  });

  it('refuses options that make no sense', () => {
    expect(() => new Backoff({ initialMs: 0, maxMs: 10 })).toThrow(RangeError);
    expect(() => new Backoff({ initialMs: 10, maxMs: 5 })).toThrow(RangeError);
    expect(() => new Backoff({ initialMs: 10, maxMs: 50, jitter: 1.5 })).toThrow(RangeError);
    expect(() => new Backoff({ initialMs: 10, maxMs: 50, factor: 0.5 })).toThrow(RangeError);
  });
});
