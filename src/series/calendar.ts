/**
 * Calendar features of an instant in the series' own time zone: hour of day and day of week as
 * sin/cos pairs (so 23:00 is next to 00:00 and Sunday next to Monday), optional day of year,
 * and holiday flags for the local day of the instant and the following days.
 */
import { publicHolidayDays, parseLocalDate } from './holidays.ts';
import type { CalendarOptions } from './types.ts';
import { civilFromDays, daysFromCivil, DAY_MS, isLeapYear, zoneClock, type ZoneClock } from './zone.ts';

const TWO_PI = 2 * Math.PI;

/** Local calendar fields of one instant. */
export interface LocalFields {
  /** Local day number (days since 1970-01-01 of the local civil date). */
  localDay: number;
  year: number;
  month: number;
  day: number;
  /** Milliseconds since local midnight (wall clock; 0 .. 86 399 999). */
  msOfDay: number;
  /** ISO day of week, Monday = 0 .. Sunday = 6. */
  dayOfWeek: number;
  /** 0-based day of the year. */
  dayOfYear: number;
  daysInYear: number;
}

export class CalendarEncoder {
  readonly clock: ZoneClock;
  readonly opts: CalendarOptions;
  readonly nHolidayDays: number;
  readonly names: string[];
  readonly series: string;
  #extra: Set<number>;
  /** local day -> holiday flag, so the per-sample lookup is one Map hit */
  #flagCache = new Map<number, boolean>();

  /**
   * @param nHolidayDays how many local days get a flag: the day of the instant and the next
   *   nHolidayDays - 1 days (0 = no holiday features even if holidays are configured).
   */
  constructor(timeZone: string, opts: CalendarOptions, nHolidayDays: number, series = '(unnamed)') {
    this.series = series;
    this.clock = zoneClock(timeZone, series);
    this.opts = opts;
    this.#extra = new Set(opts.extraDates.map((s) => parseLocalDate(s, series)));
    const wantHolidays = opts.holidays !== null || opts.extraDates.length > 0;
    this.nHolidayDays = wantHolidays ? nHolidayDays : 0;
    if (opts.holidays !== null) publicHolidayDays(opts.holidays, 2000, series); // validates region early
    const names: string[] = [];
    if (opts.hourOfDay) names.push('hour_sin', 'hour_cos');
    if (opts.dayOfWeek) names.push('dow_sin', 'dow_cos');
    if (opts.dayOfYear) names.push('doy_sin', 'doy_cos');
    for (let d = 0; d < this.nHolidayDays; d++) names.push(`holiday_d${d}`);
    this.names = names;
  }

  get size(): number {
    return this.names.length;
  }

  local(tMs: number): LocalFields {
    const L = this.clock.localMs(tMs);
    const localDay = Math.floor(L / DAY_MS);
    const { y, m, d } = civilFromDays(localDay);
    const dayOfYear = localDay - daysFromCivil(y, 1, 1);
    return {
      localDay,
      year: y,
      month: m,
      day: d,
      msOfDay: L - localDay * DAY_MS,
      dayOfWeek: (((localDay + 3) % 7) + 7) % 7, // 1970-01-01 was a Thursday (ISO index 3)
      dayOfYear,
      daysInYear: isLeapYear(y) ? 366 : 365,
    };
  }

  /** Is the local day (day number) a public holiday of the region or one of the extra dates? */
  isHoliday(localDay: number): boolean {
    let flag = this.#flagCache.get(localDay);
    if (flag === undefined) {
      const h = this.opts.holidays;
      flag = this.#extra.has(localDay) || (h !== null && publicHolidayDays(h, civilFromDays(localDay).y, this.series).has(localDay));
      if (this.#flagCache.size > 100_000) this.#flagCache.clear();
      this.#flagCache.set(localDay, flag);
    }
    return flag;
  }

  /** Write this.size features of instant tMs into out[offset ..]. */
  encode(tMs: number, out: Float64Array | number[], offset: number): void {
    const f = this.local(tMs);
    let j = offset;
    if (this.opts.hourOfDay) {
      const a = (TWO_PI * f.msOfDay) / DAY_MS;
      out[j++] = Math.sin(a);
      out[j++] = Math.cos(a);
    }
    if (this.opts.dayOfWeek) {
      // fractional day of week, so the pair moves smoothly through the day
      const a = (TWO_PI * (f.dayOfWeek + f.msOfDay / DAY_MS)) / 7;
      out[j++] = Math.sin(a);
      out[j++] = Math.cos(a);
    }
    if (this.opts.dayOfYear) {
      const a = (TWO_PI * (f.dayOfYear + f.msOfDay / DAY_MS)) / f.daysInYear;
      out[j++] = Math.sin(a);
      out[j++] = Math.cos(a);
    }
    for (let d = 0; d < this.nHolidayDays; d++) out[j++] = this.isHoliday(f.localDay + d) ? 1 : 0;
  }
}
