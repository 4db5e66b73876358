import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { expandLags, formatDurationMs, parseDurationMs, toSteps } from '../../../src/config/duration.ts';

const H = 3_600_000;

describe('durations', () => {
  it('parses single and compound units', () => {
    const v = (s: string) => {
      const r = parseDurationMs(s);
      if (!r.ok) throw new Error(r.message);
      return r.value;
    };
    expect(v('250ms')).toBe(250);
    expect(v('90s')).toBe(90_000);
    expect(v('15m')).toBe(900_000);
    expect(v('1h30m')).toBe(5_400_000);
    expect(v('1d')).toBe(86_400_000);
    // 1 week = 604 800 s (common practice: 7 x 86 400 s, SI day of 86 400 s)
    expect(v('1w')).toBe(604_800_000);
    expect(v('2w3d')).toBe(17 * 86_400_000);
  });

  it('refuses months, signs, decimals, blanks and zero with a hint', () => {
    for (const bad of ['1mo', '-1h', '1.5h', '', 'h', '1 h', '0h', '1y']) {
      const r = parseDurationMs(bad);
      expect(r.ok, bad).toBe(false);
      if (!r.ok) expect(r.hint.length).toBeGreaterThan(5);
    }
  });

  it('format and parse round-trip (property)', () => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 10 * 604_800_000 }), (ms) => {
        const r = parseDurationMs(formatDurationMs(ms));
        return r.ok && r.value === ms;
      }),
    );
  });

  it('step counts: integers are steps, durations must be whole steps', () => {
    expect(toSteps(24, H, 'x')).toEqual({ ok: true, value: 24 });
    expect(toSteps('1d', H, 'x')).toEqual({ ok: true, value: 24 });
    expect(toSteps('1d', 15 * 60_000, 'x')).toEqual({ ok: true, value: 96 });
    expect(toSteps('90m', H, 'x').ok).toBe(false);
    expect(toSteps(2.5, H, 'x').ok).toBe(false);
  });
});

describe('lag lists', () => {
  const lags = (specs: (number | string)[], step = H) => {
    const r = expandLags(specs, step);
    if (!r.ok) throw new Error(r.message);
    return r.value;
  };
  it('expands ranges, comma lists and durations; sorted and distinct', () => {
    expect(lags(['1-3'])).toEqual([1, 2, 3]);
    expect(lags([168, '1-3', 2])).toEqual([1, 2, 3, 168]);
    expect(lags(['1-3, 24, 1w'])).toEqual([1, 2, 3, 24, 168]);
    expect(lags(['1d'], 15 * 60_000)).toEqual([96]);
    expect(lags(['1-24']).length).toBe(24);
  });
  it('refuses empty, reversed, zero and fractional lags', () => {
    for (const bad of [[], ['5-2'], [0], ['0-3'], ['30m'], ['x']] as (number | string)[][]) {
      expect(expandLags(bad, H).ok, JSON.stringify(bad)).toBe(false);
    }
  });
  it('every expanded lag is an integer >= 1 inside the given ranges (property)', () => {
    fc.assert(
      fc.property(fc.array(fc.tuple(fc.integer({ min: 1, max: 200 }), fc.integer({ min: 0, max: 50 })), { minLength: 1, maxLength: 5 }), (ranges) => {
        const specs = ranges.map(([a, n]) => `${a}-${a + n}`);
        const r = expandLags(specs, H);
        if (!r.ok) return false;
        const want = new Set<number>();
        for (const [a, n] of ranges) for (let i = a; i <= a + n; i++) want.add(i);
        return r.value.length === want.size && r.value.every((x, i) => want.has(x) && (i === 0 || r.value[i - 1] < x));
      }),
    );
  });
});
