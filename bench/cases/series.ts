/**
 * Series layer speed: one daemon cycle's worth of feature building. For each of N series:
 * regularize ~1600 hourly raw readings (shuffled, with duplicates and gaps), regularize an
 * exogenous temperature series, then buildSamples with ~1400 samples (lags 1-24, 48, 168,
 * seasonal inputs, temperature lags and at-target values, full calendar with DE holidays) and
 * one buildForecastInput.
 *
 *   npm run bench -- series [--series N] [--runs R]
 */
import { buildForecastInput, buildSamples, regularize, zoneClock, type FeatureOptions, type Reading } from '../../src/series/index.ts';
import { median, numberFlag } from '../args.ts';
import { mulberry32 } from '../../src/model/random.ts';

const HOUR = 3_600_000;

export async function run(argv: string[]): Promise<void> {
  const nSeries = numberFlag(argv, '--series', 1000);
  const runs = numberFlag(argv, '--runs', 3);
  const nSamples = 1400;
  const H = 24;
  const lookback = 168;
  const nSteps = nSamples + lookback + H - 1;
  const endMs = Date.UTC(2026, 3, 1); // spans the 2026-03-29 DST change and Easter
  const startMs = endMs - (nSteps + H) * HOUR;
  const rand = mulberry32(7);
  const mk = (level: number): Reading[] => {
    const r: Reading[] = [];
    for (let i = 0; i < nSteps; i++) {
      if (rand() < 0.01) continue; // gaps
      const v = level + 20 * Math.sin((2 * Math.PI * i) / 24) + 5 * rand();
      r.push({ t: startMs + i * HOUR + Math.floor(rand() * HOUR), v });
      if (rand() < 0.02) r.push({ t: startMs + i * HOUR + 1, v }); // duplicates and 2 per bucket
    }
    for (let i = r.length - 1; i > 0; i--) {
      const j = Math.floor(rand() * (i + 1));
      [r[i], r[j]] = [r[j], r[i]];
    }
    return r;
  };
  const inputs = Array.from({ length: Math.min(nSeries, 50) }, (_, k) => mk(100 + k));
  const temp: Reading[] = [];
  for (let i = 0; i < nSteps + H; i++) temp.push({ t: startMs + i * HOUR, v: 5 + 8 * Math.sin((2 * Math.PI * (i - 14)) / 24) });
  const opts: FeatureOptions = {
    series: 'bench',
    timeZone: 'Europe/Berlin',
    horizon: H,
    lags: [...Array.from({ length: 24 }, (_, i) => i + 1), 48, 168],
    seasonSteps: 24,
    seasonalInputs: true,
    calendar: { hourOfDay: true, dayOfWeek: true, dayOfYear: true, holidays: { country: 'DE' }, extraDates: ['2026-03-02'] },
    exogenous: [{ name: 'oskaveld-outdoor-temp', lags: [1, 2, 3], atTarget: true }],
    targetMode: 'seasonal',
    groupWeights: { lags: 1, calendar: 1, exogenous: 1 },
  };
  const regOpts = { stepMs: HOUR, startMs, endMs: startMs + nSteps * HOUR, aggregation: 'mean' as const, duplicates: 'last' as const, maxFillSteps: 3 };

  const tReg: number[] = [];
  const tBuild: number[] = [];
  const cpuCycle: number[] = [];
  let nFeatures = 0;
  let usable = 0;
  const intlBefore = zoneClock('Europe/Berlin').intlCalls;
  for (let r = 0; r < runs; r++) {
    let reg = 0;
    let build = 0;
    const cpu0 = process.cpuUsage();
    for (let s = 0; s < nSeries; s++) {
      const t0 = performance.now();
      const target = regularize(inputs[s % inputs.length], regOpts);
      const exo = { 'oskaveld-outdoor-temp': regularize(temp, { ...regOpts, endMs: regOpts.endMs + H * HOUR }) };
      const t1 = performance.now();
      const set = buildSamples(target, exo, opts, { lastKnownIndex: nSteps - 1, windowSteps: nSteps });
      buildForecastInput(target, exo, opts, set.scaler, nSteps - 1);
      const t2 = performance.now();
      reg += t1 - t0;
      build += t2 - t1;
      nFeatures = set.x.cols;
      usable = set.stats.usableSamples;
    }
    const cpu = process.cpuUsage(cpu0);
    cpuCycle.push((cpu.user + cpu.system) / 1000);
    tReg.push(reg);
    tBuild.push(build);
  }
  const intl = zoneClock('Europe/Berlin').intlCalls - intlBefore;
  const rows = [
    ['series per cycle', String(nSeries)],
    ['raw readings per series', String(inputs[0].length)],
    ['samples x features', `${usable} x ${nFeatures}`],
    ['regularize (target + exo), median cycle', `${median(tReg).toFixed(0)} ms (${((median(tReg) / nSeries) * 1000).toFixed(0)} µs/series)`],
    ['buildSamples + buildForecastInput, median cycle', `${median(tBuild).toFixed(0)} ms (${((median(tBuild) / nSeries) * 1000).toFixed(0)} µs/series)`],
    ['CPU time of the whole cycle (user + system), median', `${median(cpuCycle).toFixed(0)} ms (${((median(cpuCycle) / nSeries) * 1000).toFixed(0)} µs/series)`],
    ['Intl calls over all runs (offset cache)', String(intl)],
  ];
  const w = Math.max(...rows.map((r) => r[0].length));
  for (const [k, v] of rows) console.log(`${k.padEnd(w)}  ${v}`);
}
