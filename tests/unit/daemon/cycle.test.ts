import { describe, expect, it } from 'vitest';
import { ReadCache, SeriesCycle, checkBatchFinite } from '../../../src/daemon/cycle.ts';
import type { RegularSeries } from '../../../src/series/types.ts';
import { runAll, dependencyWaves } from '../../../src/daemon/runner.ts';
import { InlineFitter } from '../../../src/daemon/pool.ts';
import { DaemonMetrics } from '../../../src/daemon/metrics.ts';
import { Backoff } from '../../../src/daemon/backoff.ts';
import { DaemonError } from '../../../src/daemon/errors.ts';
import { ManualClock } from '../../../src/daemon/clock.ts';
import type { DriftAssessor, DriftInput, FitRequest, FitResult, Fitter } from '../../../src/daemon/ports.ts';
import { captureLogger } from './helpers.ts';
import { HOUR, MemoryState, MemoryStore, resolved, syntheticLoad } from './fakes.ts';

const END = Date.UTC(2026, 10, 30, 0, 0, 0); // data up to (excluding) this instant
const NOW = END + 20 * 60_000; // 00:20, the 00:00 bucket is still open

function setup(opts: { fitter?: Fitter; drift?: DriftAssessor; clock?: ManualClock } = {}) {
  const store = new MemoryStore();
  const state = new MemoryState();
  const cap = captureLogger();
  const metrics = new DaemonMetrics({ defaultMetrics: false });
  const cycle = new SeriesCycle({
    store,
    state,
    fitter: opts.fitter ?? new InlineFitter(),
    logger: cap.logger,
    metrics,
    drift: opts.drift,
    writeBackoff: new Backoff({ baseMs: 10, capMs: 100, jitter: false }),
    ...(opts.clock ? { clock: opts.clock } : {}),
  });
  return { store, state, cap, metrics, cycle };
}

const days = (n: number) => n * 24 * HOUR;

describe('series cycle', () => {
  it('reads, fits, forecasts H steps with bands, writes, and times every stage', async () => {
    const { store, state, cycle } = setup();
    const [s] = resolved([{ name: 'oskaveld-north' }]);
    store.readings.set('oskaveld-north', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.error).toBeUndefined();
    expect(r.outcome).toBe('ok');
    expect(store.forecasts).toHaveLength(1);
    const b = store.forecasts[0];
    expect(b.issuedAt).toBe(END - HOUR); // last complete, observed step
    expect(b.points.map((p) => p.lead)).toEqual(Array.from({ length: 24 }, (_, i) => i + 1));
    expect(b.points[0].t).toBe(END);
    for (const p of b.points) {
      expect(Number.isFinite(p.value)).toBe(true);
      // Hold-out residuals seed the bands on the first cycle: 10% below, 90% above the point.
      expect(p.bands['0.1']).toBeLessThan(p.value);
      expect(p.bands['0.9']).toBeGreaterThan(p.value);
    }
    // The forecast follows the daily cycle: its peak is within a few hours of the 12:00 synthetic peak.
    const peak = b.points.reduce((a, p) => (p.value > a.value ? p : a));
    expect(Math.abs(new Date(peak.t).getUTCHours() - 12)).toBeLessThanOrEqual(3);
    // Read reaches back window + longest lag + margin.
    expect(r.readings).toBe((21 + 7 + 1) * 24);
    for (const st of ['read', 'prepare', 'fit', 'predict', 'write', 'score'] as const) expect(r.timings[st]).toBeGreaterThan(0);
    expect(r.timings.drift).toBe(0); // no assessor wired: stage skipped
    expect(store.health).toHaveLength(0);
    expect(state.model('oskaveld-north')?.series).toBe('oskaveld-north');
    expect(state.pending('oskaveld-north')).toHaveLength(24);
    expect(r.warmStarted).toBe(false);
  });

  it('warm-starts the next refit from the stored model and scores the matured forecast', async () => {
    const { store, state, cycle } = setup();
    const [s] = resolved([{ name: 'brennick-yard' }]);
    const all = syntheticLoad({ fromMs: END - days(40), toMs: END + days(2), seed: 3 });
    store.readings.set('brennick-yard', all.filter((x) => x.t < END));
    const first = await cycle.run(s, { nowMs: NOW });
    expect(first.outcome).toBe('ok');
    const issued = (await state.latestIssued('brennick-yard'))!;
    const poolBefore = Array.from({ length: 24 }, (_, h) => state.residualsOf('brennick-yard', h + 1).length);
    expect(poolBefore[0]).toBeGreaterThan(0); // seeded from the hold-out residuals

    // One day later the 24 targets have actuals.
    store.readings.set('brennick-yard', all.filter((x) => x.t < END + days(1)));
    const second = await cycle.run(s, { nowMs: NOW + days(1) });
    expect(second.outcome).toBe('ok');
    expect(second.warmStarted).toBe(true);
    expect(second.scored).toBe(24);
    expect(state.pending('brennick-yard').map((p) => p.issuedAt)).toEqual(new Array(24).fill(second.issuedAt)); // the new one only

    // Scores recomputed by hand from the issued forecast and the actuals.
    const values = issued.points.map((p) => p.value);
    const actual = values.map((_, h) => all.find((x) => x.t === issued.issuedAt + (h + 1) * HOUR)!.v);
    const errs = actual.map((a, h) => a - values[h]);
    const mae = errs.reduce((a, e) => a + Math.abs(e), 0) / 24;
    const overall = store.scores.find((p) => p.lead === 0)!;
    expect(overall.n).toBe(24);
    expect(overall.mae).toBeCloseTo(mae, 9);
    expect(overall.bias).toBeCloseTo(errs.reduce((a, e) => a + e, 0) / 24, 9);
    expect(overall.season).toBe(24);
    expect(overall.t).toBe(issued.issuedAt + 24 * HOUR);
    const lead5 = store.scores.find((p) => p.lead === 5)!;
    expect(lead5.mae).toBeCloseTo(Math.abs(errs[4]), 9);
    expect(store.scores.filter((p) => p.lead > 0)).toHaveLength(24);
    // Residuals per lead grew by one matured forecast (the newest entry of each lead).
    for (let h = 0; h < 24; h++) {
      const l = state.residualsOf('brennick-yard', h + 1);
      expect(l.length).toBe(Math.min(336, poolBefore[h] + 1));
      expect(l[l.length - 1]).toBeCloseTo(errs[h], 9);
    }
  });

  it('a damaged stored model means a cold refit with a warning naming the series; a JSON one (older state file) warm-starts', async () => {
    const { store, state, cycle, cap } = setup();
    const [s] = resolved([{ name: 'tarrow-hill' }]);
    store.readings.set('tarrow-hill', syntheticLoad({ fromMs: END - days(40), toMs: END, seed: 5 }));
    state.models.set('tarrow-hill', Uint8Array.from([0x52, 0x43, 0x46, 0x50, 1, 0, 0, 0, 9, 9]));
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.outcome).toBe('ok');
    expect(r.warmStarted).toBe(false);
    expect(cap.problems()).toEqual([expect.objectContaining({ series: 'tarrow-hill', code: 'BAD_FITTED', msg: expect.stringMatching(/refitting cold/) })]);
    // The cold fit replaced it with a good packed model.
    const fitted = state.model('tarrow-hill')!;
    expect(fitted.warmStarted).toBe(false);
    // The same forecaster as JSON text, as state files kept it before models were packed.
    state.models.set('tarrow-hill', JSON.stringify(fitted));
    const again = await cycle.run(s, { nowMs: NOW + HOUR });
    expect(again.outcome).toBe('ok');
    expect(again.warmStarted).toBe(true);
    expect(cap.problems()).toHaveLength(1);
    expect(state.models.get('tarrow-hill')).toBeInstanceOf(Uint8Array);
  });

  it('never writes a NaN forecast: a non-finite value is rejected with its code and counted', async () => {
    const fitter: Fitter = {
      kind: 'inline',
      queued: 0,
      async fitAndForecast(req: FitRequest): Promise<FitResult> {
        const real = await new InlineFitter().fitAndForecast(req);
        real.forecast.values[7] = Number.NaN;
        return real;
      },
      async stop() {},
    };
    const { store, cycle, metrics } = setup({ fitter });
    const [s] = resolved([{ name: 'tarrow-hill' }]);
    store.readings.set('tarrow-hill', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.outcome).toBe('failed');
    expect(r.error?.code).toBe('NON_FINITE_FORECAST');
    expect(r.failedStage).toBe('write');
    expect(store.forecasts).toHaveLength(0);
    expect(await metrics.registry.getSingleMetricAsString('radcast_forecasts_rejected_total')).toContain('series="tarrow-hill"} 1');
  });

  it('checkBatchFinite rejects Infinity in a band too', () => {
    expect(() => checkBatchFinite({ series: 'x', issuedAt: 0, stepMs: HOUR, points: [{ t: HOUR, lead: 1, value: 1, bands: { '0.9': Infinity } }] })).toThrowError(/band 0.9 at lead 1/);
  });

  it('stale input: no forecast, outcome stale with INPUT_STALE', async () => {
    const { store, cycle } = setup();
    const [s] = resolved([{ name: 'oskaveld-north', drift: { staleAfter: '3h' } }]);
    store.readings.set('oskaveld-north', syntheticLoad({ fromMs: END - days(40), toMs: END - 6 * HOUR }));
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.outcome).toBe('stale');
    expect(r.error?.code).toBe('INPUT_STALE');
    expect(store.forecasts).toHaveLength(0);
  });

  it('retries a store write when the error allows it, and counts the retry', async () => {
    const { store, cycle, metrics } = setup();
    const [s] = resolved([{ name: 'oskaveld-north' }]);
    store.readings.set('oskaveld-north', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    let n = 0;
    store.failWrite = (kind) => (kind === 'forecast' && n++ === 0 ? new DaemonError('STORE_UNREACHABLE', 'connection refused', { retryable: true }) : undefined);
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.outcome).toBe('ok');
    expect(store.forecasts).toHaveLength(1);
    expect(await metrics.registry.getSingleMetricAsString('radcast_store_write_retries_total')).toContain('store="memory",kind="forecast"} 1');
  });

  it('does not retry a write whose error says retrying will not help', async () => {
    const { store, cycle, metrics } = setup();
    const [s] = resolved([{ name: 'oskaveld-north' }]);
    store.readings.set('oskaveld-north', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    let calls = 0;
    store.failWrite = (kind) => (kind === 'forecast' ? (calls++, new DaemonError('STORE_REJECTED', 'bad request')) : undefined);
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.error?.code).toBe('STORE_REJECTED');
    expect(calls).toBe(1);
    expect(await metrics.registry.getSingleMetricAsString('radcast_store_write_failures_total')).toContain('kind="forecast"} 1');
  });

  it('aborted before the write (shutdown bound): nothing is written', async () => {
    const { store, cycle } = setup();
    const [s] = resolved([{ name: 'oskaveld-north' }]);
    store.readings.set('oskaveld-north', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    const ac = new AbortController();
    const fitter = new InlineFitter();
    const slow: Fitter = { kind: 'inline', queued: 0, stop: async () => {}, fitAndForecast: async (req) => { const r = await fitter.fitAndForecast(req); ac.abort(); return r; } };
    const { cycle: c2, store: st2 } = setup({ fitter: slow });
    st2.readings = store.readings;
    const r = await c2.run(s, { nowMs: NOW, signal: ac.signal });
    expect(r.outcome).toBe('aborted');
    expect(st2.forecasts).toHaveLength(0);
    void cycle;
  });

  it('hands matured errors and novelty to the drift integration point and writes its health point', async () => {
    const seen: DriftInput[] = [];
    const drift: DriftAssessor = {
      assess(input) {
        seen.push(input);
        const n = (input.previous as number | null) ?? 0;
        return { state: n > 0 ? 'watch' : 'ok', statistic: n, recentMase: 0.5, baselineMase: input.baselineMase ?? NaN, noveltyShare: 0, next: n + 1, transition: n === 1 ? { from: 'ok', to: 'watch' } : undefined };
      },
    };
    const { store, cycle, state, cap } = setup({ drift });
    const [s] = resolved([{ name: 'oskaveld-north' }]);
    const all = syntheticLoad({ fromMs: END - days(40), toMs: END + days(2) });
    store.readings.set('oskaveld-north', all.filter((x) => x.t < END));
    await cycle.run(s, { nowMs: NOW });
    store.readings.set('oskaveld-north', all.filter((x) => x.t < END + days(1)));
    const r2 = await cycle.run(s, { nowMs: NOW + days(1) });
    expect(seen).toHaveLength(2);
    expect(seen[0].matured).toHaveLength(0);
    expect(seen[1].matured).toHaveLength(24);
    expect(seen[1].matured[0]).toMatchObject({ lead: 1, t: END });
    expect(seen[1].matured.every((e) => e.scaledError >= 0)).toBe(true);
    expect(seen[1].novelty).toBeGreaterThan(0);
    expect(seen[0].baselineMase).toBeGreaterThan(0);
    expect(state.drift.get('oskaveld-north')).toBe(2);
    expect(store.health.map((h) => h.state)).toEqual(['ok', 'watch']);
    expect(r2.drift?.state).toBe('watch');
    expect(r2.timings.drift).toBeGreaterThan(0);
    expect(cap.lines.some((l) => l.msg === 'drift state changed' && l.to === 'watch')).toBe(true);
  });
});

describe('runAll over many series', () => {
  it('isolates failing series: the others are forecast, failures are counted by code', async () => {
    const { store, cycle, metrics, cap } = setup();
    const list = resolved([{ name: 'good-1' }, { name: 'unreachable' }, { name: 'garbage' }, { name: 'good-2' }]);
    store.readings.set('good-1', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    store.readings.set('good-2', syntheticLoad({ fromMs: END - days(40), toMs: END, seed: 9 }));
    // Garbage: recent readings exist, but almost all values are non-numeric.
    const g = syntheticLoad({ fromMs: END - days(40), toMs: END });
    store.readings.set('garbage', g.map((r, i) => ({ t: r.t, v: i % 97 === 0 || i >= g.length - 2 ? r.v : (('x' as unknown) as number) })));
    store.failRead = (sel) => (sel.name === 'unreachable' ? new DaemonError('STORE_UNREACHABLE', 'connect ECONNREFUSED', { retryable: true }) : undefined);
    const sum = await runAll(cycle, list, { concurrency: 2, nowMs: NOW });
    expect(sum.results.map((r) => [r.series, r.outcome])).toEqual([['good-1', 'ok'], ['unreachable', 'failed'], ['garbage', 'failed'], ['good-2', 'ok']]);
    expect(sum.ok).toBe(2);
    expect(sum.failed).toBe(2);
    expect(sum.byCode.STORE_UNREACHABLE).toBe(1);
    expect(Object.keys(sum.byCode)).toHaveLength(2);
    const garbageCode = sum.results[2].error!.code;
    expect(garbageCode).toMatch(/TOO_LITTLE_HISTORY|MISSING_INPUT|GAP/);
    expect(store.forecasts.map((b) => b.series).sort()).toEqual(['good-1', 'good-2']);
    const text = await metrics.registry.getSingleMetricAsString('radcast_series_failures_total');
    expect(text).toContain('series="unreachable",code="STORE_UNREACHABLE"} 1');
    expect(text).toContain(`series="garbage",code="${garbageCode}"} 1`);
    const errLines = cap.lines.filter((l) => l.msg.startsWith('series cycle failed'));
    expect(errLines.map((l) => l.series).sort()).toEqual(['garbage', 'unreachable']);
    expect(errLines.every((l) => typeof l.code === 'string')).toBe(true);
    expect(sum.timings.fit).toBeGreaterThan(0);
  });

  it('an input shared by many series is read and regularised once per run, with the same forecasts as alone', async () => {
    const { store, cycle } = setup();
    const list = resolved([{ name: 'north' }, { name: 'yard' }, { name: 'hill' }], { exogenous: [{ name: 'oskaveld-outdoor-temp', lags: [1, 24] }] });
    store.readings.set('oskaveld-outdoor-temp', syntheticLoad({ fromMs: END - days(40), toMs: END, seed: 11, level: 5 }));
    list.forEach((s, k) => store.readings.set(s.name, syntheticLoad({ fromMs: END - days(40), toMs: END, seed: k + 2 })));
    const made: string[] = [];
    class CountingCache extends ReadCache {
      override regular(key: string, make: () => RegularSeries): RegularSeries {
        return super.regular(key, () => {
          made.push(key);
          return make();
        });
      }
    }
    const cache = new CountingCache();
    const shared = [];
    for (const s of list) shared.push(await cycle.run(s, { nowMs: NOW, cache }));
    expect(made).toHaveLength(1);
    expect(store.reads).toBe(4); // three targets, the input once
    const { cycle: alone, store: store2 } = setup();
    store2.readings = store.readings;
    for (const [k, s] of list.entries()) {
      const r = await alone.run(s, { nowMs: NOW });
      expect(r.outcome).toBe('ok');
      expect(r.forecast!.points.map((p) => p.value)).toEqual(shared[k].forecast!.points.map((p) => p.value));
    }
  });

  it('runs a series after the series whose forecast it uses at target time', () => {
    const list = resolved([
      { name: 'load', exogenous: [{ name: 'temp', lags: [1], atTarget: true }] },
      { name: 'temp' },
      { name: 'other' },
    ]);
    expect(dependencyWaves(list).map((w) => w.map((s) => s.name))).toEqual([['temp', 'other'], ['load']]);
  });

  it('stage timings come from the injected clock', async () => {
    const clock = new ManualClock(NOW);
    const { store, cycle } = setup({ clock });
    const [s] = resolved([{ name: 'x' }]);
    store.readings.set('x', syntheticLoad({ fromMs: END - days(40), toMs: END }));
    const r = await cycle.run(s, { nowMs: NOW });
    expect(r.outcome).toBe('ok');
    // Time does not move on a manual clock: the main-thread stages take 0 ms of it.
    expect([r.timings.read, r.timings.prepare, r.timings.write, r.timings.score]).toEqual([0, 0, 0, 0]);
    expect(r.totalMs).toBe(0);
  });
});
