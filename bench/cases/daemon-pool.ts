/**
 * Does the worker pool's message cost matter? For N series (hourly, 8-week window, K = 32,
 * about 44 features, H = 24) this measures, per series:
 *  - the size of one fit request and one result (v8 structured-clone bytes),
 *  - the round trip of that request through a piscina worker and back with no work (echo),
 *  - a warm-started fit + forecast inline (main thread) and through the pool,
 * and prints the message share of the pool's time, and the 1000-series projection.
 *
 *   npm run bench -- daemon-pool [--series 40] [--threads 2]
 */
import os from 'node:os';
import v8 from 'node:v8';
import { parseConfigObject } from '../../src/config/load.ts';
import { regularize, lastValueIndex } from '../../src/series/index.ts';
import { InlineFitter, PoolFitter } from '../../src/daemon/pool.ts';
import type { FitRequest } from '../../src/daemon/ports.ts';
import { numberFlag } from '../args.ts';
import { mulberry32 } from '../../src/model/random.ts';

const HOUR = 3_600_000;

/** Median (mean of the two middle values for an even count; NaN when empty). */
function median(a: number[]): number {
  const s = [...a].sort((x, y) => x - y);
  return s.length ? (s.length % 2 ? s[s.length >> 1] : (s[s.length / 2 - 1] + s[s.length / 2]) / 2) : NaN;
}

/** Invented hourly load with daily and weekly shape (seeded by k). */
function readings(k: number, fromMs: number, n: number) {
  const rnd = mulberry32(0x9e3779b9 ^ k);
  const out = [];
  for (let i = 0; i < n; i++) {
    const t = fromMs + i * HOUR;
    const h = (t / HOUR) % 24;
    const wd = Math.floor(t / 86_400_000) % 7 < 5 ? 1 : 0.9;
    out.push({ t, v: (400 + 10 * (k % 13)) * wd * (1 + 0.2 * Math.sin((2 * Math.PI * (h - 7)) / 24)) + 20 * (rnd() - 0.5) });
  }
  return out;
}

export async function run(argv: string[]): Promise<void> {
  const n = numberFlag(argv, '--series', 40);
  const threads = numberFlag(argv, '--threads', Math.min(2, os.availableParallelism()));
  const r = parseConfigObject({
    defaults: { window: '8w', centres: 32, lags: ['1-16', 24, 168], horizon: 24, timeZone: 'Europe/Berlin', calendar: { holidays: { country: 'DE' } } },
    series: [{ name: 'bench' }],
  });
  if (!r.ok) throw new Error(r.issues.map((i) => i.message).join('; '));
  const s = r.value.series[0];
  const end = Date.UTC(2026, 10, 30);
  const steps = s.settings.windowSteps + s.maxLagSteps + 48;
  const reqs: FitRequest[] = [];
  for (let k = 0; k < n; k++) {
    const target = regularize(readings(k, end - steps * HOUR, steps), { ...s.settings.regularize, stepMs: HOUR, startMs: end - steps * HOUR, endMs: end, series: `s${k}` });
    reqs.push({ settings: { ...s.settings, series: `s${k}` }, target, exo: {}, originIndex: lastValueIndex(target) - 1, warm: null, holdout: false });
  }
  const inline = new InlineFitter();
  // Cold fits give every series its warm-start model; the measured refits are warm, one step later.
  for (const q of reqs) {
    q.warm = (await inline.fitAndForecast(q)).fitted;
    q.originIndex += 1;
  }
  const result0 = await inline.fitAndForecast(reqs[0]);
  const reqBytes = v8.serialize(reqs[0]).length;
  const resBytes = v8.serialize({ ok: true, result: result0 }).length;

  const pool = new PoolFitter({ threads });
  await Promise.all(Array.from({ length: threads }, () => pool.echo(reqs[0]))); // start the workers
  const echoMs: number[] = [];
  for (const q of reqs) {
    const t0 = performance.now();
    await pool.echo(q);
    echoMs.push(performance.now() - t0);
  }
  // Echo of a result-sized payload too (results carry the new model back).
  const echoResMs: number[] = [];
  for (let i = 0; i < Math.min(n, 20); i++) {
    const t0 = performance.now();
    await pool.echo(result0);
    echoResMs.push(performance.now() - t0);
  }
  const inlineMs: number[] = [];
  let t0 = performance.now();
  for (const q of reqs) {
    const t = performance.now();
    await inline.fitAndForecast(q);
    inlineMs.push(performance.now() - t);
  }
  const inlineWall = performance.now() - t0;
  // One untimed pass first: each worker compiles (JIT) the fit code on its own, as the main thread did during the cold fits.
  await Promise.all(reqs.map((q) => pool.fitAndForecast(q)));
  t0 = performance.now();
  const inWorker: number[] = [];
  await Promise.all(reqs.map(async (q) => {
    const res = await pool.fitAndForecast(q);
    inWorker.push(res.fitMs + res.predictMs);
  }));
  const poolWall = performance.now() - t0;
  await pool.stop();

  const roundTrip = median(echoMs) / 2 + median(echoResMs) / 2; // request out + result back
  const fit = median(inlineMs);
  console.log(`series ${n}, window ${s.settings.windowSteps} steps, K ${s.settings.fit.nCentres}, features ${result0.fitted.model.nFeatures}, H ${s.settings.features.horizon}, threads ${threads}`);
  console.log('quantity                                   value');
  console.log(`request size (structured clone)            ${(reqBytes / 1024).toFixed(1)} KiB`);
  console.log(`result size (structured clone)             ${(resBytes / 1024).toFixed(1)} KiB`);
  console.log(`echo round trip, request-sized (median)    ${median(echoMs).toFixed(3)} ms`);
  console.log(`echo round trip, result-sized (median)     ${median(echoResMs).toFixed(3)} ms`);
  console.log(`warm fit + forecast inline (median)        ${fit.toFixed(1)} ms`);
  console.log(`warm fit + forecast in worker (median)     ${median(inWorker).toFixed(1)} ms`);
  console.log(`message share of one pooled fit            ${((100 * roundTrip) / (roundTrip + fit)).toFixed(2)} %`);
  console.log(`wall: inline ${(inlineWall / 1000).toFixed(2)} s (${(n / (inlineWall / 1000)).toFixed(1)} series/s), pool ${(poolWall / 1000).toFixed(2)} s (${(n / (poolWall / 1000)).toFixed(1)} series/s)`);
  console.log(`projection for 1000 series: messages ${((1000 * roundTrip) / 1000).toFixed(2)} s of main-thread time, fits ${((1000 * fit) / 1000 / threads).toFixed(1)} s on ${threads} threads`);
}
