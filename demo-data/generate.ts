/**
 * Seeded generator of the demo data for the invented Oskaveld district heating network.
 *
 *   npx tsx demo-data/generate.ts            writes the CSVs and manifest.json beside this file
 *   npx tsx demo-data/generate.ts --check    exit 1 when the committed files differ from a fresh run
 *
 * One year of hourly readings (2024-11-25 .. 2025-11-24, Europe/Berlin):
 *   oskaveld-outdoor-temp  outdoor temperature, degC: annual and daily cycle plus multi-day weather
 *   oskaveld-north         residential substation, kW
 *   brennick-yard          workshops and offices, kW: strong working-day profile
 *   tarrow-hill            mixed, kW: a new block is connected three weeks before the end, so its heating
 *                          response (kW per heating degree) rises by 60 % over one day; the base load stays
 * Heat load follows heating degrees of a smoothed outdoor temperature (buildings respond slowly),
 * a daily profile (morning and evening peaks, night setback), weekends and DE public holidays
 * (lower, like a Sunday) and a hot-water base load. Also: a 41 h outage of the temperature
 * sensor, a 5 h gap at tarrow-hill and a few single-hour meter spikes. The events are listed in
 * manifest.json so tests and the demo can check what is found. The data are invented.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import Holidays from 'date-holidays';
import { mulberry32 } from '../src/model/random.ts';

const HOUR = 3_600_000;
const ZONE = 'Europe/Berlin';
/** 2024-11-25T00:00 Europe/Berlin (CET, UTC+1). */
export const START_MS = Date.UTC(2024, 10, 24, 23);
/** 364 days = 52 whole weeks. */
export const HOURS = 364 * 24;
const SEED = 20241125;

export const SERIES = ['oskaveld-north', 'brennick-yard', 'tarrow-hill'] as const;
export const TEMP = 'oskaveld-outdoor-temp';

/** Standard normal by Box-Muller. */
function gaussian(rnd: () => number): () => number {
  return () => {
    const u = 1 - rnd();
    const v = rnd();
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  };
}

interface LocalTime {
  date: string;
  hour: number;
  /** 0 = Sunday .. 6 = Saturday. */
  weekday: number;
  offset: string;
}

const fmt = new Intl.DateTimeFormat('en-CA', { timeZone: ZONE, year: 'numeric', month: '2-digit', day: '2-digit', hour: '2-digit', hourCycle: 'h23', weekday: 'short', timeZoneName: 'longOffset' });
const WEEKDAYS: Record<string, number> = { Sun: 0, Mon: 1, Tue: 2, Wed: 3, Thu: 4, Fri: 5, Sat: 6 };

function local(ms: number): LocalTime {
  const p: Record<string, string> = {};
  for (const part of fmt.formatToParts(new Date(ms))) p[part.type] = part.value;
  const off = (p.timeZoneName ?? 'GMT+01:00').replace('GMT', '') || '+00:00';
  return { date: `${p.year}-${p.month}-${p.day}`, hour: Number(p.hour), weekday: WEEKDAYS[p.weekday], offset: off };
}

/** Local ISO-8601 time with offset, e.g. 2025-03-30T03:00:00+02:00. */
function isoLocal(ms: number, lt: LocalTime): string {
  return `${lt.date}T${String(lt.hour).padStart(2, '0')}:00:00${lt.offset}`;
}

function publicHolidays(): Set<string> {
  const hd = new Holidays('DE');
  const out = new Set<string>();
  for (const year of [2024, 2025]) {
    for (const h of hd.getHolidays(year)) if (h.type === 'public') out.add(h.date.slice(0, 10));
  }
  return out;
}

/** Relative daily profile of space heating by local hour (night setback, morning and evening peaks). */
const RESIDENTIAL = [0.78, 0.74, 0.72, 0.72, 0.76, 0.92, 1.18, 1.3, 1.22, 1.08, 1.0, 0.97, 0.95, 0.93, 0.93, 0.96, 1.03, 1.14, 1.2, 1.17, 1.09, 1.0, 0.9, 0.83];
const WORKSHOP = [0.55, 0.53, 0.52, 0.52, 0.58, 0.8, 1.15, 1.4, 1.45, 1.42, 1.38, 1.33, 1.3, 1.32, 1.33, 1.3, 1.2, 1.0, 0.8, 0.68, 0.62, 0.6, 0.58, 0.56];

interface Substation {
  name: (typeof SERIES)[number];
  /** Hot-water and losses, kW. */
  baseKw: number;
  /** kW per heating degree (K below 16 degC). */
  slopeKw: number;
  profile: number[];
  /** Multiplier of the heating part on rest days (weekend, public holiday). */
  restDay: number;
  /** Extra factor of the base load on working days. */
  workBase: number;
}

const SUBSTATIONS: Substation[] = [
  { name: 'oskaveld-north', baseKw: 140, slopeKw: 48, profile: RESIDENTIAL, restDay: 1.04, workBase: 1.0 },
  { name: 'brennick-yard', baseKw: 90, slopeKw: 34, profile: WORKSHOP, restDay: 0.62, workBase: 1.6 },
  { name: 'tarrow-hill', baseKw: 80, slopeKw: 27, profile: RESIDENTIAL, restDay: 0.95, workBase: 1.1 },
];

export interface Manifest {
  seed: number;
  timeZone: string;
  start: string;
  endExclusive: string;
  stepMs: number;
  series: string[];
  gaps: { series: string; from: string; toExclusive: string; hours: number }[];
  spikes: { series: string; at: string; factor: number }[];
  /** Heating response (kW per heating degree) multiplied by heatingFactor, ramped in over rampHours. */
  shift: { series: string; from: string; rampHours: number; heatingFactor: number };
  holidays: string[];
}

export function generate(): { csv: Record<string, string>; manifest: Manifest } {
  const rnd = mulberry32(SEED);
  const n01 = gaussian(rnd);
  const holidays = publicHolidays();
  const times = Array.from({ length: HOURS }, (_, i) => START_MS + i * HOUR);
  const lts = times.map(local);

  // Outdoor temperature: annual cycle (coldest around 20 January), daily cycle peaking mid-afternoon,
  // AR(1) weather anomaly with multi-day persistence (phi per hour 0.985).
  const temp = new Float64Array(HOURS);
  let anomaly = 0;
  for (let i = 0; i < HOURS; i++) {
    const doy = (times[i] - Date.UTC(2025, 0, 1)) / (24 * HOUR);
    const annual = 9.5 - 10.5 * Math.cos((2 * Math.PI * (doy - 20)) / 365.25);
    const dailyAmp = 2.5 + 2.5 * (0.5 - 0.5 * Math.cos((2 * Math.PI * (doy - 20)) / 365.25));
    const daily = dailyAmp * Math.cos((2 * Math.PI * (lts[i].hour - 15)) / 24);
    anomaly = 0.985 * anomaly + 0.55 * n01();
    temp[i] = annual + daily + anomaly + 0.3 * n01();
  }
  // Buildings respond to a smoothed temperature (exponential smoothing, time constant ~12 h).
  const felt = new Float64Array(HOURS);
  felt[0] = temp[0];
  for (let i = 1; i < HOURS; i++) felt[i] = felt[i - 1] + (temp[i] - felt[i - 1]) / 12;

  const idx = (isoUtc: string) => (Date.parse(isoUtc) - START_MS) / HOUR;
  const shiftFrom = idx('2025-11-02T23:00:00Z'); // 2025-11-03 00:00 local, three weeks before the end
  const rampHours = 24;
  // A plain level step (load x1.25) is absorbed by the level-mode model within two days and never
  // shows as error drift; a changed response to the weather is what a new connected block does.
  const heatingFactor = 1.6;
  const spikes = [
    { series: 'oskaveld-north', at: '2025-01-29T06:00:00Z', factor: 1.9 },
    { series: 'brennick-yard', at: '2025-03-12T10:00:00Z', factor: 2.1 },
    { series: 'tarrow-hill', at: '2025-06-18T14:00:00Z', factor: 2.6 },
    { series: 'oskaveld-north', at: '2025-08-05T02:00:00Z', factor: 0.2 },
    { series: 'brennick-yard', at: '2025-09-23T08:00:00Z', factor: 1.8 },
  ];
  const gaps = [
    { series: TEMP, from: '2025-10-14T05:00:00Z', hours: 41 },
    { series: 'tarrow-hill', from: '2025-04-08T09:00:00Z', hours: 5 },
  ];

  const values: Record<string, Float64Array> = { [TEMP]: temp };
  for (const s of SUBSTATIONS) {
    const v = new Float64Array(HOURS);
    let noise = 0;
    for (let i = 0; i < HOURS; i++) {
      const lt = lts[i];
      const rest = lt.weekday === 0 || lt.weekday === 6 || holidays.has(lt.date);
      // Rest days: the morning peak comes an hour or two later.
      const h = rest ? (lt.hour + 23) % 24 : lt.hour;
      const degrees = Math.max(0, 16 - felt[i]);
      const connected = s.name === 'tarrow-hill' && i >= shiftFrom ? 1 + (heatingFactor - 1) * Math.min(1, (i - shiftFrom + 1) / rampHours) : 1;
      const heating = connected * s.slopeKw * degrees * s.profile[h] * (rest ? s.restDay : 1);
      const base = s.baseKw * (rest ? 1 : s.workBase) * (0.85 + 0.3 * RESIDENTIAL[lt.hour] / 1.3);
      noise = 0.8 * noise + 0.025 * n01();
      const x = (heating + base) * (1 + noise);
      v[i] = x;
    }
    values[s.name] = v;
  }
  for (const sp of spikes) values[sp.series][idx(sp.at)] *= sp.factor;
  const missing: Record<string, Set<number>> = {};
  for (const g of gaps) {
    const set = (missing[g.series] ??= new Set());
    for (let k = 0; k < g.hours; k++) set.add(idx(g.from) + k);
  }

  const csv: Record<string, string> = {};
  for (const name of [...SERIES, TEMP]) {
    const lines = ['timestamp,value'];
    for (let i = 0; i < HOURS; i++) {
      if (missing[name]?.has(i)) continue;
      lines.push(`${isoLocal(times[i], lts[i])},${values[name][i].toFixed(1)}`);
    }
    csv[name] = lines.join('\n') + '\n';
  }
  const iso = (ms: number) => new Date(ms).toISOString().replace('.000Z', 'Z');
  const manifest: Manifest = {
    seed: SEED,
    timeZone: ZONE,
    start: iso(START_MS),
    endExclusive: iso(START_MS + HOURS * HOUR),
    stepMs: HOUR,
    series: [...SERIES, TEMP],
    gaps: gaps.map((g) => ({ series: g.series, from: g.from, toExclusive: iso(Date.parse(g.from) + g.hours * HOUR), hours: g.hours })),
    spikes,
    shift: { series: 'tarrow-hill', from: iso(START_MS + shiftFrom * HOUR), rampHours, heatingFactor },
    holidays: [...holidays].filter((d) => d >= lts[0].date && d <= lts[HOURS - 1].date).sort(),
  };
  return { csv, manifest };
}

const here = dirname(fileURLToPath(import.meta.url));
export const DEMO_DIR = here;

if (process.argv[1] && fileURLToPath(import.meta.url) === process.argv[1]) {
  const { csv, manifest } = generate();
  const files: [string, string][] = [...Object.entries(csv).map(([k, v]) => [`${k}.csv`, v] as [string, string]), ['manifest.json', JSON.stringify(manifest, null, 2) + '\n']];
  if (process.argv.includes('--check')) {
    const stale = files.filter(([f, text]) => {
      try {
        return readFileSync(join(here, f), 'utf8') !== text;
      } catch {
        return true;
      }
    });
    if (stale.length) {
      console.error(`stale: ${stale.map(([f]) => f).join(', ')}; run npx tsx demo-data/generate.ts`);
      process.exit(1);
    }
    console.log('demo data up to date');
  } else {
    let bytes = 0;
    for (const [f, text] of files) {
      writeFileSync(join(here, f), text);
      bytes += Buffer.byteLength(text);
    }
    console.log(`wrote ${files.length} files, ${(bytes / 1e6).toFixed(2)} MB, to ${here}`);
  }
}
