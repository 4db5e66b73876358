/**
 * Which target mode should be the default? Rolling-origin comparison of 'absolute', 'level' and
 * 'seasonal' targets with the same features and the same fit (DEFAULT_FIT_OPTIONS of src/model),
 * on three hourly series:
 *  - drift: invented load with daily and weekly cycles, DE holidays, a random-walk level and a
 *    downward trend (seeded; the kind of series the issue says level/seasonal targets help);
 *  - steady: the same without drift (control: a default must not hurt stationary series);
 *  - seattle: NOAA 1981-2010 hourly temperature normals for Seattle (vega-datasets
 *    seattle-weather-hourly-normals.csv; source NOAA NCDC, U.S. Government work), whose level
 *    drifts with the annual cycle.
 * Training window 8 weeks (1344 steps), H = 24, lags 1-24 and 168, seasonal inputs, calendar.
 * Scores: MAE and RMSE over all origins and leads, and MAE relative to seasonal naive (value
 * one day earlier) on the same origins. Run with the model's linear terms on (the default) and
 * off: with linear terms the level and seasonal bases are affine in the (standardised) inputs,
 * so the least-squares fit absorbs them and the three modes should score the same.
 *
 *   npm run bench -- target-mode [--quick] [--every STEPS]
 */
import { readFileSync } from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { DEFAULT_FIT_OPTIONS, fitRbf, predictRbf } from '../../src/model/index.ts';
import { buildForecastInput, buildSamples, CalendarEncoder, regularize, type FeatureOptions, type Reading, type RegularSeries, type TargetMode } from '../../src/series/index.ts';
import { numberFlag } from '../args.ts';
import { mulberry32 } from '../../src/model/random.ts';

const HOUR = 3_600_000;
const H = 24;
const WINDOW = 1344;
const MODES: TargetMode[] = ['absolute', 'level', 'seasonal'];

function gauss(r: () => number): number {
  return Math.sqrt(-2 * Math.log(1 - r())) * Math.cos(2 * Math.PI * r());
}

interface Dataset {
  name: string;
  series: RegularSeries;
  timeZone: string;
  holidays: FeatureOptions['calendar']['holidays'];
}

function synthetic(drift: boolean, weeks: number): Dataset {
  const r = mulberry32(drift ? 11 : 12);
  const start = Date.UTC(2026, 0, 4, 23); // Monday 2026-01-05 00:00 in Berlin
  const cal = new CalendarEncoder('Europe/Berlin', { hourOfDay: false, dayOfWeek: false, dayOfYear: false, holidays: { country: 'DE' }, extraDates: [] }, 1);
  const n = weeks * 168;
  const readings: Reading[] = [];
  let level = 200;
  for (let i = 0; i < n; i++) {
    const t = start + i * HOUR;
    const f = cal.local(t);
    const hour = f.msOfDay / HOUR;
    const off = f.dayOfWeek >= 5 || cal.isHoliday(f.localDay);
    const daily = 25 * Math.sin((2 * Math.PI * (hour - 8)) / 24) + 10 * Math.sin((4 * Math.PI * (hour - 6)) / 24);
    if (drift) level += 1.5 * gauss(r) - 0.03;
    readings.push({ t, v: level + (off ? 0.75 : 1) * daily - (off ? 15 : 0) + 5 * gauss(r) });
  }
  const series = regularize(readings, { stepMs: HOUR, startMs: start, endMs: start + n * HOUR, aggregation: 'mean', duplicates: 'last', maxFillSteps: 2 });
  return { name: drift ? 'drift (invented)' : 'steady (invented)', series, timeZone: 'Europe/Berlin', holidays: { country: 'DE' } };
}

function seattle(): Dataset {
  const file = path.join(path.dirname(fileURLToPath(import.meta.url)), '..', '..', 'node_modules', 'vega-datasets', 'data', 'seattle-weather-hourly-normals.csv');
  const lines = readFileSync(file, 'utf8').trim().split('\n').slice(1);
  // Normals are in local standard time (UTC-8 all year, no DST): parse as UTC and add 8 h.
  const readings: Reading[] = lines.map((l) => {
    const [d, , temp] = l.split(',');
    return { t: Date.parse(`${d}Z`) + 8 * HOUR, v: Number(temp) };
  });
  const start = readings[0].t;
  const end = readings[readings.length - 1].t + HOUR;
  const series = regularize(readings, { stepMs: HOUR, startMs: start, endMs: end, aggregation: 'mean', duplicates: 'last', maxFillSteps: 2 });
  return { name: 'seattle temperature (NOAA normals)', series, timeZone: 'Etc/GMT+8', holidays: null };
}

function featureOptions(d: Dataset, targetMode: TargetMode): FeatureOptions {
  return {
    series: d.name,
    timeZone: d.timeZone,
    horizon: H,
    lags: [...Array.from({ length: 24 }, (_, i) => i + 1), 168],
    seasonSteps: 24,
    seasonalInputs: true,
    calendar: { hourOfDay: true, dayOfWeek: true, dayOfYear: false, holidays: d.holidays, extraDates: [] },
    exogenous: [],
    targetMode,
    groupWeights: { lags: 1, calendar: 1, exogenous: 1 },
  };
}

interface Score {
  mae: number;
  rmse: number;
  maeSnaive: number;
  origins: number;
  maeByLead: number[];
}

function evaluate(d: Dataset, mode: TargetMode, every: number, linearTerms: boolean): Score {
  const v = d.series.values;
  const opts = featureOptions(d, mode);
  let abs = 0;
  let sq = 0;
  let absNaive = 0;
  let count = 0;
  let origins = 0;
  const byLead = new Array<number>(H).fill(0);
  for (let o = WINDOW - 1; o + H < v.length; o += every) {
    const set = buildSamples(d.series, {}, opts, { lastKnownIndex: o, windowSteps: WINDOW });
    const { model } = fitRbf(set.x, set.y, { ...DEFAULT_FIT_OPTIONS, linearTerms });
    const fi = buildForecastInput(d.series, {}, opts, set.scaler, o);
    const p = predictRbf(model, { data: fi.x, rows: 1, cols: fi.x.length });
    for (let h = 1; h <= H; h++) {
      const actual = v[o + h];
      const e = p.y.data[h - 1] + fi.base[h - 1] - actual;
      abs += Math.abs(e);
      sq += e * e;
      byLead[h - 1] += Math.abs(e);
      absNaive += Math.abs(v[o + h - 24] - actual);
      count++;
    }
    origins++;
  }
  return { mae: abs / count, rmse: Math.sqrt(sq / count), maeSnaive: absNaive / count, origins, maeByLead: byLead.map((x) => x / origins) };
}

export async function run(argv: string[]): Promise<void> {
  const quick = argv.includes('--quick');
  const every = numberFlag(argv, '--every', quick ? 169 : 49);
  const sets = [synthetic(true, 16), synthetic(false, 16), seattle()];
  console.log(`window ${WINDOW} steps, H ${H}, origins every ${every} steps, fit: DEFAULT_FIT_OPTIONS (K=${DEFAULT_FIT_OPTIONS.nCentres}, ${DEFAULT_FIT_OPTIONS.widthMode})`);
  console.log(['dataset', 'linear', 'targetMode', 'origins', 'MAE', 'RMSE', 'MAE/snaive', 'MAE lead 1', 'lead 12', 'lead 24'].join('\t'));
  for (const d of sets) {
    for (const linearTerms of [true, false]) {
      for (const mode of MODES) {
        const s = evaluate(d, mode, d.name.startsWith('seattle') ? every * 2 - 1 : every, linearTerms);
        console.log([d.name, linearTerms ? 'on' : 'off', mode, s.origins, s.mae.toFixed(3), s.rmse.toFixed(3), (s.mae / s.maeSnaive).toFixed(3), s.maeByLead[0].toFixed(3), s.maeByLead[11].toFixed(3), s.maeByLead[23].toFixed(3)].join('\t'));
      }
    }
  }
}
