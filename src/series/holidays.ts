/**
 * Public holidays from the date-holidays package (data: CC-BY-SA-3, maintained upstream),
 * as sets of local day numbers (days since 1970-01-01 of the local civil date), cached per
 * region and year. Only holidays of type "public" count; bank holidays, school holidays,
 * optional days and observances do not.
 */
import Holidays from 'date-holidays';
import { SeriesError } from './errors.ts';
import { daysFromCivil, DAY_MS } from './zone.ts';

export interface HolidayRegion {
  country: string;
  state?: string;
  region?: string;
}

const yearCache = new Map<string, Set<number>>();
const validated = new Map<string, Holidays>();

function regionKey(r: HolidayRegion): string {
  return `${r.country}|${r.state ?? ''}|${r.region ?? ''}`;
}

function holidaysFor(r: HolidayRegion, series: string): Holidays {
  const key = regionKey(r);
  const cached = validated.get(key);
  if (cached) return cached;
  const probe = new Holidays();
  const fail = (field: string, message: string, hint: string): never => {
    throw new SeriesError({ code: 'UNKNOWN_HOLIDAY_REGION', series, field, message, hint });
  };
  const countries = probe.getCountries() ?? {};
  if (!(r.country in countries)) fail('calendar.holidays.country', `"${r.country}" is not a country known to date-holidays`, 'use an ISO 3166-1 alpha-2 code such as DE');
  if (r.state !== undefined) {
    const states = probe.getStates(r.country) ?? {};
    if (!(r.state in states)) fail('calendar.holidays.state', `"${r.state}" is not a state of ${r.country} in date-holidays`, `known: ${Object.keys(states).join(', ') || 'none'}`);
    if (r.region !== undefined) {
      const regions = probe.getRegions(r.country, r.state) ?? {};
      if (!(r.region in regions)) fail('calendar.holidays.region', `"${r.region}" is not a region of ${r.country}-${r.state} in date-holidays`, `known: ${Object.keys(regions).join(', ') || 'none'}`);
    }
  } else if (r.region !== undefined) {
    fail('calendar.holidays.region', 'a region needs a state', 'set calendar.holidays.state too');
  }
  const hd = new Holidays(r.country, r.state ?? '', r.region ?? '', { types: ['public'] });
  validated.set(key, hd);
  return hd;
}

/** Local day numbers of the public holidays of `year` in the region. */
export function publicHolidayDays(r: HolidayRegion, year: number, series = '(unnamed)'): Set<number> {
  const key = `${regionKey(r)}|${year}`;
  let set = yearCache.get(key);
  if (set) return set;
  const hd = holidaysFor(r, series);
  set = new Set<number>();
  for (const h of hd.getHolidays(year)) {
    if (h.type !== 'public') continue;
    // h.date is the local date "YYYY-MM-DD hh:mm:ss" in the country's zone.
    const m = /^(\d{4})-(\d{2})-(\d{2})/.exec(h.date);
    if (!m) continue;
    const first = daysFromCivil(Number(m[1]), Number(m[2]), Number(m[3]));
    // Multi-day holidays: one flag per local day covered (start/end are instants).
    const nDays = Math.max(1, Math.round((h.end.getTime() - h.start.getTime()) / DAY_MS));
    for (let d = 0; d < nDays; d++) set.add(first + d);
  }
  yearCache.set(key, set);
  return set;
}

/** Parse "YYYY-MM-DD" into a local day number; throws BAD_EXTRA_DATE. */
export function parseLocalDate(s: string, series = '(unnamed)'): number {
  const m = /^(\d{4})-(\d{2})-(\d{2})$/.exec(s);
  const bad = (): never => {
    throw new SeriesError({
      code: 'BAD_EXTRA_DATE',
      series,
      field: 'calendar.extraDates',
      message: `"${s}" is not a valid local date`,
      hint: 'write dates as YYYY-MM-DD, e.g. 2026-07-20',
    });
  };
  if (!m) return bad();
  const y = Number(m[1]);
  const mo = Number(m[2]);
  const d = Number(m[3]);
  const days = daysFromCivil(y, mo, d);
  const back = new Date(days * DAY_MS);
  if (back.getUTCFullYear() !== y || back.getUTCMonth() + 1 !== mo || back.getUTCDate() !== d) return bad();
  return days;
}
