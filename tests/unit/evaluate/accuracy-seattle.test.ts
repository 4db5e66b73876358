/**
 * Accuracy bar on an open dataset: hourly temperature normals of Seattle from the npm package
 * vega-datasets (data/seattle-weather-hourly-normals.csv; the package is BSD-3-Clause; its
 * datapackage.json names the source "NOAA National Climatic Data Center (NCDC)", 1981-2010 Climate
 * Normals, licence "U.S. Government Dataset" (https://www.usa.gov/government-works)). One year of
 * hourly values with a daily cycle. The times carry no offset; they are read as UTC (local standard
 * time of the station), so the calendar inputs use time zone UTC.
 *
 * Settings: the schema defaults for an hourly series (window 8w, lags 1-24 and 168, 32 centres,
 * level target, origins every day over the last four weeks): nothing is tuned for this data.
 */
import { describe, expect, it } from 'vitest';
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import path from 'node:path';
import { parseConfigObject } from '../../../src/config/index.ts';
import { regularize } from '../../../src/series/index.ts';
import { backtest, MODEL_METHOD } from '../../../src/evaluate/backtest.ts';

function seattle(column: 'temperature' | 'pressure'): Array<{ t: number; v: number }> {
  const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../../..');
  const lines = readFileSync(path.join(root, 'node_modules/vega-datasets/data/seattle-weather-hourly-normals.csv'), 'utf8').trim().split('\n');
  const col = lines[0].split(',').indexOf(column);
  return lines.slice(1).map((l) => {
    const f = l.split(',');
    return { t: Date.parse(`${f[0]}Z`), v: Number(f[col]) };
  });
}

describe('accuracy on NOAA hourly normals (Seattle, vega-datasets)', () => {
  it('the RBF beats both seasonal-naive baselines and is no worse than ridge', { timeout: 300_000 }, async () => {
    const readings = seattle('temperature');
    expect(readings.length).toBe(8759);
    const loaded = parseConfigObject({ series: [{ name: 'seattle-temperature', timeZone: 'UTC' }] });
    if (!loaded.ok) throw new Error(JSON.stringify(loaded.issues));
    const r = loaded.value.series[0];
    const st = r.settings;
    const series = regularize(readings, { stepMs: st.stepMs, startMs: readings[0].t, endMs: readings[readings.length - 1].t + st.stepMs, ...st.regularize, series: r.name });
    const res = await backtest(series, {}, st, { spanSteps: r.backtest.spanSteps, everySteps: r.backtest.everySteps, workers: 2 });
    const mase = Object.fromEntries(res.methods.map((m) => [m.name, m.overall.mase!]));
    expect(res.origins).toBe(28);
    expect(mase[MODEL_METHOD]).toBeLessThan(mase['seasonal-naive-daily']);
    expect(mase[MODEL_METHOD]).toBeLessThan(mase['seasonal-naive-weekly']);
    expect(mase[MODEL_METHOD]).toBeLessThanOrEqual(mase['ridge-ar']);
  });
});
