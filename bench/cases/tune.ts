/**
 * Tune parallelism: the same grid run three ways on one hourly series (daily and weekly cycle +
 * noise, horizon 24, lags 1-24 and 168):
 *   settings  combinations side by side on T worker threads, each backtest inline in its thread
 *   origins   combinations one after another, each backtest spreading its origin chains over T workers
 *   serial    everything in the main thread
 * Results are identical in the three modes (checked); only the wall time differs.
 *
 *   npm run bench -- tune [--windows 2w,4w] [--centres 8,16] [--span-days 7] [--threads 2]
 */
import { availableParallelism } from 'node:os';
import { parseConfigText } from '../../src/config/load.ts';
import { buildCandidates, gridFor } from '../../src/evaluate/tune-grid.ts';
import { tune } from '../../src/evaluate/tune.ts';
import type { RegularSeries } from '../../src/series/types.ts';
import { stringFlag } from '../args.ts';
import { mulberry32 } from '../../src/model/random.ts';

const HOUR = 3_600_000;

export async function run(argv: string[]): Promise<void> {
  const windows = stringFlag(argv, '--windows', '2w,4w').split(',');
  const centres = stringFlag(argv, '--centres', '8,16').split(',').map(Number);
  const spanDays = Number(stringFlag(argv, '--span-days', '7'));
  const threads = Number(stringFlag(argv, '--threads', String(availableParallelism())));
  const text = `
series:
  - name: bench-load
    horizon: 1d
    lags: ["1-24", 168]
    calendar: { hourOfDay: true, dayOfWeek: true }
    backtest: { every: 1d, span: ${spanDays}d }
    tune: { windows: [${windows.join(', ')}], centres: [${centres.join(', ')}], widthModes: [shared] }
`;
  const loaded = parseConfigText(text);
  if (!loaded.ok) throw new Error(JSON.stringify(loaded.issues));
  const r = loaded.value.series[0];
  const { candidates } = buildCandidates(loaded.value.config, 0, gridFor(loaded.value.config.series[0]), { seed: 1 });
  const maxWindow = Math.max(...candidates.map((c) => c.windowSteps));
  const n = maxWindow + spanDays * 24 + 48;
  const rand = mulberry32(3);
  const values = new Float64Array(n);
  for (let i = 0; i < n; i++) values[i] = 400 + 120 * Math.sin((2 * Math.PI * (i % 24)) / 24) - (Math.floor(i / 24) % 7 >= 5 ? 60 : 0) + 25 * (rand() - 0.5);
  const target: RegularSeries = { startMs: Date.UTC(2025, 0, 6), stepMs: HOUR, values, stats: { readingsIn: n, dropped: 0, outOfRange: 0, duplicates: 0, filled: 0, missingSteps: 0 } };
  const base = { spanSteps: r.backtest.spanSteps, everySteps: r.backtest.everySteps, seed: 1 };
  const modes: Array<[string, { threads: number; originWorkers: number }]> = [
    ['settings', { threads, originWorkers: 0 }],
    ['origins', { threads: 0, originWorkers: threads }],
    ['serial', { threads: 0, originWorkers: 0 }],
  ];
  const rows: string[] = [];
  let reference: string | null = null;
  for (const [name, par] of modes) {
    const t0 = performance.now();
    const res = await tune(target, {}, candidates, { ...base, ...par });
    const wall = performance.now() - t0;
    const key = JSON.stringify(res.ranking.map((e) => [e.id, e.score.model.mase]));
    reference ??= key;
    const fitMs = res.ranking.reduce((s, e) => s + e.score.fit.meanMs * (e.score.fit.coldFits + e.score.fit.warmFits), 0);
    rows.push(`${name.padEnd(9)} ${String(par.threads).padStart(7)} ${String(par.originWorkers).padStart(8)} ${(wall / 1000).toFixed(1).padStart(8)} ${(fitMs / 1000).toFixed(1).padStart(10)}  ${key === reference ? 'same' : 'DIFFERENT'}`);
  }
  console.log(`${candidates.length} combinations x ${Math.floor(base.spanSteps / base.everySteps)} origins, windows ${windows.join('/')}, K ${centres.join('/')}, series ${n} steps`);
  console.log('mode      threads  workers   wall s  sum fit s  ranking');
  for (const row of rows) console.log(row);
}
