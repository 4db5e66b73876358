import { describe, expect, it } from 'vitest';
import { addForecastResiduals, addResiduals, applyBands, bandOffsets, bandsForForecast, conformalQuantile, createResidualPool, originPhase, residualPoolFromRows, bandScale } from '../../../src/evaluate/bands.ts';
import { MetricAccumulator } from '../../../src/evaluate/metrics.ts';
import { gaussian, rng } from '../forecast/fixtures.ts';

describe('split-conformal order statistic', () => {
  // Lei et al. (2018, JASA 113(523)): rank ceil((n + 1) q) for an upper band, floor((n + 1) q) for a lower one.
  // n = 9 residuals 1..9: q = 0.9 -> ceil(9) = 9th; q = 0.1 -> floor(1) = 1st; q = 0.5 -> ceil(5) = 5th.
  // n = 19 residuals 1..19: q = 0.9 -> ceil(18) = 18th; q = 0.1 -> floor(2) = 2nd.
  it('picks the ranks of the finite-sample rule', () => {
    const s9 = Float64Array.from({ length: 9 }, (_, i) => i + 1);
    expect(conformalQuantile(s9, 0.9)).toBe(9);
    expect(conformalQuantile(s9, 0.1)).toBe(1);
    expect(conformalQuantile(s9, 0.5)).toBe(5);
    const s19 = Float64Array.from({ length: 19 }, (_, i) => i + 1);
    expect(conformalQuantile(s19, 0.9)).toBe(18);
    expect(conformalQuantile(s19, 0.1)).toBe(2);
    // Too few residuals for the rank: clamped to the extremes rather than invented.
    expect(conformalQuantile(Float64Array.of(1, 2, 3), 0.95)).toBe(3);
    expect(conformalQuantile(new Float64Array(0), 0.9)).toBeNaN();
  });
});

describe('residual pool', () => {
  it('is bounded per lead, drops the oldest first and counts drops', () => {
    const pool = createResidualPool(2, 3);
    expect(addResiduals(pool, 1, [1, 2, 3, 4, 5])).toBe(2);
    expect(pool.byLead[0]).toEqual([3, 4, 5]);
    expect(pool.dropped).toBe(2);
    addForecastResiduals(pool, [10, Number.NaN], [9, 1], 0);
    expect(pool.byLead[0]).toEqual([4, 5, 1]);
    expect(pool.phaseByLead[0]).toEqual([0, 0, 0]);
    expect(pool.byLead[1]).toEqual([]); // NaN residual skipped
    expect(JSON.parse(JSON.stringify(pool))).toEqual(pool);
  });

  it('pools neighbouring leads when a lead has too few residuals, and gives no band below the minimum', () => {
    const pool = createResidualPool(3, 100);
    addResiduals(pool, 1, Array.from({ length: 40 }, (_, i) => i));
    addResiduals(pool, 2, [100]);
    const b = bandOffsets(pool, [0.1, 0.9], { minPerLead: 30, minTotal: 8 });
    expect(b.poolRadius[0]).toBe(0);
    expect(b.nUsed[0]).toBe(40);
    expect(b.poolRadius[1]).toBe(1); // borrowed leads 1 and 3
    expect(b.nUsed[1]).toBe(41);
    // lead 3 has none: radius 1 adds lead 2 (1 residual), radius 2 adds lead 1 (40) -> 41
    expect(b.poolRadius[2]).toBe(2);
    expect(b.nUsed[2]).toBe(41);
    const empty = createResidualPool(2, 10);
    addResiduals(empty, 1, [1, 2]);
    const e = bandOffsets(empty, [0.1, 0.9]);
    expect(e.offsets[0][0]).toBeNaN();
  });

  it('prefers residuals of origins at the same phase, widening the phase window when short', () => {
    const pool = createResidualPool(1, 1000, 24);
    // Origins at phase 23 have errors of spread 10, all others spread 1.
    for (let k = 0; k < 40; k++) {
      for (let p = 0; p < 24; p++) addResiduals(pool, 1, [(p === 23 ? 10 : 1) * ((k % 9) - 4)], p);
    }
    const at23 = bandOffsets(pool, [0.1, 0.9], { phase: 23 });
    const at5 = bandOffsets(pool, [0.1, 0.9], { phase: 5 });
    expect(at23.phaseRadius[0]).toBe(0);
    expect(at23.offsets[1][0] - at23.offsets[0][0]).toBeGreaterThan(5 * (at5.offsets[1][0] - at5.offsets[0][0]));
    // 40 residuals at phase 3, minPerLead 60 -> phases 2 and 4 join (120 residuals).
    const wide = bandOffsets(pool, [0.1, 0.9], { phase: 3, minPerLead: 60 });
    expect(wide.phaseRadius[0]).toBe(1);
    expect(wide.nUsed[0]).toBe(120);
    // Phase distance is circular: phase 0 is next to phase 23.
    const p0 = bandOffsets(pool, [0.1, 0.9], { phase: 0, minPerLead: 60 });
    expect(p0.offsets[1][0]).toBeGreaterThan(at5.offsets[1][0]);
  });

  it('numbers origin phases from the epoch in steps', () => {
    const hour = 3_600_000;
    expect(originPhase(Date.UTC(2024, 0, 1, 0), hour, 24)).toBe(0);
    expect(originPhase(Date.UTC(2024, 0, 1, 23), hour, 24)).toBe(23);
    expect(originPhase(Date.UTC(2024, 0, 9, 23), hour, 24)).toBe(23);
    expect(originPhase(Date.UTC(2024, 0, 1, 5), hour, 1)).toBe(0);
  });

  it('gives the daemon bands keyed by quantile', () => {
    const pool = createResidualPool(2, 100);
    for (let i = 0; i < 50; i++) addForecastResiduals(pool, [i - 25, 2 * (i - 25)], [0, 0]);
    const bands = bandsForForecast([100, 200], pool, [0.1, 0.9]);
    expect(Object.keys(bands[0]).sort()).toEqual(['0.1', '0.9']);
    expect(bands[0]['0.1']).toBeLessThan(100);
    expect(bands[0]['0.9']).toBeGreaterThan(100);
    expect(bands[1]['0.9'] - bands[1]['0.1']).toBeGreaterThan(bands[0]['0.9'] - bands[0]['0.1']);
  });
});

describe('coverage on synthetic data with known noise', () => {
  it('10%..90% bands from 120 residuals per lead cover about 80% of new points', () => {
    // Residuals of a perfect point forecast are the noise itself: i.i.d. N(0, 2^2). The
    // conformal band from n = 120 has expected coverage (109 - 12) / 121 = 0.802.
    const g = gaussian(rng(5));
    const H = 24;
    const pool = createResidualPool(H, 120);
    for (let k = 0; k < 120; k++) for (let h = 1; h <= H; h++) addResiduals(pool, h, [2 * g()]);
    const band = bandOffsets(pool, [0.1, 0.9]);
    const acc = new MetricAccumulator([0.1, 0.9]);
    const forecast = new Float64Array(H).fill(0);
    for (let k = 0; k < 2000; k++) {
      const b = applyBands(forecast, band);
      for (let h = 0; h < H; h++) acc.add(2 * g(), 0, 1, [b[0][h], b[1][h]]);
    }
    const r = acc.result();
    expect(r.coverage!).toBeGreaterThan(0.77);
    expect(r.coverage!).toBeLessThan(0.83);
    // The exact 80% band of N(0, 4) is +-1.2816 * 2 wide: 5.13.
    expect(r.width!).toBeGreaterThan(4.6);
    expect(r.width!).toBeLessThan(5.7);
  });
});

describe('pool from stored rows', () => {
  it('derives the origin phase from target time and lead', () => {
    const hour = 3_600_000;
    const t0 = Date.UTC(2024, 0, 1, 0);
    // Origin 05:00, lead 3 -> target 08:00; origin 23:00, lead 1 -> target 00:00 next day.
    const pool = residualPoolFromRows(
      [
        { lead: 3, t: t0 + 8 * hour, residual: 1.5 },
        { lead: 1, t: t0 + 24 * hour, residual: -2 },
        { lead: 9, t: t0, residual: 7 }, // lead beyond the horizon: ignored
      ],
      { horizon: 4, stepMs: hour, phases: 24 },
    );
    expect(pool.byLead[2]).toEqual([1.5]);
    expect(pool.phaseByLead[2]).toEqual([5]);
    expect(pool.byLead[0]).toEqual([-2]);
    expect(pool.phaseByLead[0]).toEqual([23]);
  });
});

describe('scaled residuals', () => {
  it('bands follow the scale of the new origin', () => {
    // Residuals stored relative to scale 2 at their origins; at an origin of scale 10 the band is 5x wider.
    const rows = Array.from({ length: 60 }, (_, k) => ({ lead: 1, t: k * 3_600_000, residual: 2 * ((k % 11) - 5), scale: 2 }));
    const pool = residualPoolFromRows(rows, { horizon: 1, stepMs: 3_600_000 });
    const narrow = bandsForForecast([0], pool, [0.1, 0.9], { scale: 2 })[0];
    const wide = bandsForForecast([0], pool, [0.1, 0.9], { scale: 10 })[0];
    expect(wide['0.9'] - wide['0.1']).toBeCloseTo(5 * (narrow['0.9'] - narrow['0.1']), 12);
  });

  it('bandScale is the MASE scale of the window, and 1 for a constant window', () => {
    // values 0, 1, ..., 9 with m = 1: every step difference is 1
    const v = Array.from({ length: 10 }, (_, i) => i);
    expect(bandScale(v, 9, 5, 1)).toBe(1);
    const w = Array.from({ length: 10 }, (_, i) => 3 * i);
    expect(bandScale(w, 9, 5, 1)).toBe(3);
    expect(bandScale(new Array(10).fill(4), 9, 5, 1)).toBe(1);
  });
});
