/**
 * Rolling-origin backtest throughput on the open Seattle hourly temperature normals (vega-datasets,
 * NOAA NCDC): schema-default settings (window 8w, K 32, lags 1-24 and 168, H 24), 28 daily
 * origins, inline and on worker threads. Prints wall time, origins per second and the median fit.
 *
 *   npm run bench -- backtest [--workers 0,1,2]
 */
import { readFileSync } from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseConfigObject } from '../../src/config/load.ts';
import { regularize } from '../../src/series/index.ts';
import { backtest } from '../../src/evaluate/backtest.ts';

export async function run(argv: string[]): Promise<void> {
  const i = argv.indexOf('--workers');
  const workerList = (i >= 0 ? argv[i + 1] : '0,2').split(',').map(Number);
  const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../..');
  const lines = readFileSync(path.join(root, 'node_modules/vega-datasets/data/seattle-weather-hourly-normals.csv'), 'utf8').trim().split('\n');
  const readings = lines.slice(1).map((l) => {
    const f = l.split(',');
    return { t: Date.parse(`${f[0]}Z`), v: Number(f[2]) };
  });
  const loaded = parseConfigObject({ series: [{ name: 'seattle-temperature', timeZone: 'UTC' }] });
  if (!loaded.ok) throw new Error('bench config invalid');
  const r = loaded.value.series[0];
  const st = r.settings;
  const series = regularize(readings, { stepMs: st.stepMs, startMs: readings[0].t, endMs: readings[readings.length - 1].t + st.stepMs, ...st.regularize });
  console.log(`series: ${series.values.length} hourly steps, window ${st.windowSteps}, K ${st.fit.nCentres}, H ${st.features.horizon}, ${r.backtest.origins} origins`);
  console.log('workers  wall s  origins/s  fit median ms  cold  warm');
  for (const w of workerList) {
    const t0 = performance.now();
    const res = await backtest(series, {}, st, { spanSteps: r.backtest.spanSteps, everySteps: r.backtest.everySteps, workers: w });
    const wall = (performance.now() - t0) / 1000;
    console.log(`${String(w).padStart(7)}  ${wall.toFixed(1).padStart(6)}  ${(res.origins / wall).toFixed(2).padStart(9)}  ${res.fit.medianMs.toFixed(0).padStart(13)}  ${String(res.fit.coldFits).padStart(4)}  ${String(res.fit.warmFits).padStart(4)}`);
  }
}
