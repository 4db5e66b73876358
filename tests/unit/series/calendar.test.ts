import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { CalendarEncoder, DAY_MS, daysFromCivil, civilFromDays, SeriesError, ZoneClock, type CalendarOptions } from '../../../src/series/index.ts';

const HOUR = 3_600_000;
const ALL: CalendarOptions = { hourOfDay: true, dayOfWeek: true, dayOfYear: true, holidays: null, extraDates: [] };

/** Local hour (wall clock, fractional) and local date of each UTC instant. */
function walk(zone: string, fromUtc: number, steps: number, stepMs = HOUR): Array<{ hour: number; date: string; dow: number }> {
  const cal = new CalendarEncoder(zone, ALL, 0);
  const out = [];
  for (let i = 0; i < steps; i++) {
    const f = cal.local(fromUtc + i * stepMs);
    out.push({ hour: f.msOfDay / HOUR, date: `${f.year}-${String(f.month).padStart(2, '0')}-${String(f.day).padStart(2, '0')}`, dow: f.dayOfWeek });
  }
  return out;
}

/** Number of steps whose local date equals `date`, walking from a UTC instant well before it. */
function localDayLength(zone: string, date: string, fromUtc: number): number {
  return walk(zone, fromUtc, 72).filter((x) => x.date === date).length;
}

// Expected transitions from the published rules (the IANA tz database as shipped with Node's Intl
// encodes them): EU Directive 2000/84/EC, summer time from the last Sunday of March to the last
// Sunday of October, switching at 01:00 UTC; US Energy Policy Act of 2005 (15 U.S.C. 260a), from
// the second Sunday of March to the first Sunday of November, switching at 02:00 local time.
describe('calendar: daylight-saving days map correctly', () => {
  it('Europe/Berlin spring forward on Sunday 2026-03-29 (23-hour day, 02:00 local does not exist)', () => {
    const midnight = Date.UTC(2026, 2, 28, 23); // 00:00 CET
    const days = walk('Europe/Berlin', midnight, 24);
    expect(days.slice(0, 23).every((d) => d.date === '2026-03-29' && d.dow === 6)).toBe(true);
    expect(days.slice(0, 23).map((d) => d.hour)).toEqual([0, 1, ...Array.from({ length: 21 }, (_, i) => i + 3)]);
    expect(days[23]).toEqual({ hour: 0, date: '2026-03-30', dow: 0 }); // Monday 00:00 CEST = 22:00 UTC
    expect(localDayLength('Europe/Berlin', '2026-03-29', Date.UTC(2026, 2, 28, 0))).toBe(23);
  });

  it('Europe/Berlin fall back on Sunday 2026-10-25 (25-hour day, 02:00 local occurs twice)', () => {
    const midnight = Date.UTC(2026, 9, 24, 22); // 00:00 CEST
    const days = walk('Europe/Berlin', midnight, 26);
    expect(days.slice(0, 25).map((d) => d.hour)).toEqual([0, 1, 2, 2, ...Array.from({ length: 21 }, (_, i) => i + 3)]);
    expect(days[25]).toEqual({ hour: 0, date: '2026-10-26', dow: 0 });
    expect(localDayLength('Europe/Berlin', '2026-10-25', Date.UTC(2026, 9, 24, 0))).toBe(25);
  });

  it('America/New_York spring forward on Sunday 2026-03-08 and fall back on Sunday 2026-11-01', () => {
    const spring = walk('America/New_York', Date.UTC(2026, 2, 8, 5), 24); // 00:00 EST = 05:00 UTC
    expect(spring.slice(0, 23).map((d) => d.hour)).toEqual([0, 1, ...Array.from({ length: 21 }, (_, i) => i + 3)]);
    expect(spring[23]).toEqual({ hour: 0, date: '2026-03-09', dow: 0 });
    const fall = walk('America/New_York', Date.UTC(2026, 10, 1, 4), 26); // 00:00 EDT = 04:00 UTC
    expect(fall.slice(0, 25).map((d) => d.hour)).toEqual([0, 1, 1, ...Array.from({ length: 22 }, (_, i) => i + 2)]);
    expect(fall[25]).toEqual({ hour: 0, date: '2026-11-02', dow: 0 });
    expect(localDayLength('America/New_York', '2026-03-08', Date.UTC(2026, 2, 7, 0))).toBe(23);
    expect(localDayLength('America/New_York', '2026-11-01', Date.UTC(2026, 9, 31, 0))).toBe(25);
  });

  it('15-minute steps across the Berlin spring-forward hour jump from 01:45 to 03:00', () => {
    const hours = walk('Europe/Berlin', Date.UTC(2026, 2, 29, 0, 30), 4, 15 * 60_000).map((d) => d.hour);
    expect(hours).toEqual([1.5, 1.75, 3, 3.25]);
  });

  it('hour-of-day features equal on the same local wall-clock hour before and after the change', () => {
    const cal = new CalendarEncoder('Europe/Berlin', { ...ALL, dayOfWeek: false, dayOfYear: false }, 0);
    const a = new Float64Array(2);
    const b = new Float64Array(2);
    cal.encode(Date.UTC(2026, 2, 28, 11), a, 0); // Saturday 12:00 CET
    cal.encode(Date.UTC(2026, 2, 29, 10), b, 0); // Sunday 12:00 CEST
    expect(Array.from(b)).toEqual(Array.from(a));
    // 12:00 is half way round the clock: sin(pi) = 0, cos(pi) = -1
    expect(a[0]).toBeCloseTo(0, 12);
    expect(a[1]).toBeCloseTo(-1, 12);
  });

  it('offsets agree with moment-timezone (independent tz data) hourly through 2026, and every 15 minutes on change days', () => {
    // moment-timezone ships its own copy of the IANA database (a dependency of date-holidays).
    const require = createRequire(import.meta.url);
    const moment = require('moment-timezone') as { tz: { zone(name: string): { utcOffset(t: number): number } | null } };
    const zones = ['Europe/Berlin', 'America/New_York', 'Australia/Lord_Howe', 'Asia/Kathmandu', 'America/St_Johns', 'Australia/Adelaide'];
    const from = Date.UTC(2026, 0, 1);
    for (const zone of zones) {
      const clock = new ZoneClock(zone);
      const z = moment.tz.zone(zone)!;
      // moment's Zone#utcOffset is in minutes west of UTC (sign opposite to ours)
      const ref = (t: number): number => -z.utcOffset(t) * 60_000;
      let mismatches = 0;
      let changes = 0;
      for (let t = from; t < from + 365 * DAY_MS; t += HOUR) {
        if (clock.offsetMs(t) !== ref(t)) mismatches++;
        if (ref(t) !== ref(t + HOUR)) {
          changes++;
          for (let q = t; q < t + HOUR; q += 15 * 60_000) if (clock.offsetMs(q) !== ref(q)) mismatches++;
        }
      }
      expect(mismatches, zone).toBe(0);
      expect(changes, zone).toBe(zone === 'Asia/Kathmandu' ? 0 : 2);
      // the cache keeps Intl calls to two per UTC day plus two per hour on change days
      expect(clock.intlCalls).toBeLessThan(2 * 366 + 2 * 24 * 4 + 16);
    }
  });

  it('civil date conversion round-trips and matches Date for 1900-2100', () => {
    const bad: number[] = [];
    for (let d = daysFromCivil(1900, 1, 1); d <= daysFromCivil(2100, 12, 31); d += 7) {
      const c = civilFromDays(d);
      const js = new Date(d * DAY_MS);
      if (c.y !== js.getUTCFullYear() || c.m !== js.getUTCMonth() + 1 || c.d !== js.getUTCDate() || daysFromCivil(c.y, c.m, c.d) !== d) bad.push(d);
    }
    expect(bad).toEqual([]);
    expect(daysFromCivil(1970, 1, 1)).toBe(0);
    expect(daysFromCivil(2000, 3, 1)).toBe(11017); // 2000 is a leap year: Feb has 29 days
  });

  it('unknown time zone is a SeriesError naming the series', () => {
    expect(() => new CalendarEncoder('Europe/Oskaveld', ALL, 0, 'oskaveld-north')).toThrow(/UNKNOWN_TIME_ZONE series=oskaveld-north/);
  });
});

/** Easter Sunday by the anonymous Gregorian algorithm (Meeus, Astronomical Algorithms, ch. 8). */
function easterSunday(y: number): [number, number] {
  const a = y % 19;
  const b = Math.floor(y / 100);
  const c = y % 100;
  const d = Math.floor(b / 4);
  const e = b % 4;
  const f = Math.floor((b + 8) / 25);
  const g = Math.floor((b - f + 1) / 3);
  const h = (19 * a + b - d - g + 15) % 30;
  const i = Math.floor(c / 4);
  const k = c % 4;
  const l = (32 + 2 * e + 2 * i - h - k) % 7;
  const m = Math.floor((a + 11 * h + 22 * l) / 451);
  const month = Math.floor((h + l - 7 * m + 114) / 31);
  const day = ((h + l - 7 * m + 114) % 31) + 1;
  return [month, day];
}

describe('calendar: holiday flags', () => {
  const de = (extra: string[] = [], state?: string): CalendarEncoder =>
    new CalendarEncoder('Europe/Berlin', { ...ALL, holidays: state ? { country: 'DE', state } : { country: 'DE' }, extraDates: extra }, 2, 'oskaveld-north');
  const day = (y: number, m: number, d: number): number => daysFromCivil(y, m, d);

  it('2026-10-03 (Tag der Deutschen Einheit) is a public holiday in DE; the days around it are not', () => {
    // Fixed national holiday since the 1990 Unification Treaty (Einigungsvertrag, Art. 2 (2));
    // listed as type "public" for DE in the date-holidays data.
    const cal = de();
    expect(cal.isHoliday(day(2026, 10, 3))).toBe(true);
    expect(cal.isHoliday(day(2026, 10, 2))).toBe(false);
    expect(cal.isHoliday(day(2026, 10, 4))).toBe(false);
  });

  it('Easter Monday is flagged every year 2020-2035 on the date the Meeus algorithm gives', () => {
    const cal = de();
    for (let y = 2020; y <= 2035; y++) {
      const [m, d] = easterSunday(y);
      expect(cal.isHoliday(day(y, m, d) + 1), `Easter Monday ${y}`).toBe(true);
    }
    expect(easterSunday(2026)).toEqual([4, 5]); // so Easter Monday 2026 is 2026-04-06
  });

  it('state holidays follow the configured state: 2026-01-06 (Epiphany) in Bavaria, not in Berlin', () => {
    // date-holidays data: "Heilige Drei Könige" is public in BY, BW and ST only.
    expect(de([], 'BY').isHoliday(day(2026, 1, 6))).toBe(true);
    expect(de([], 'BE').isHoliday(day(2026, 1, 6))).toBe(false);
  });

  it('only public holidays count: 2026-12-24 (bank holiday from 14:00 in date-holidays) is not flagged', () => {
    expect(de().isHoliday(day(2026, 12, 24))).toBe(false);
    expect(de().isHoliday(day(2026, 12, 25))).toBe(true);
  });

  it('US: Thanksgiving 2026-11-26, the fourth Thursday of November (5 U.S.C. 6103)', () => {
    const us = new CalendarEncoder('America/New_York', { ...ALL, holidays: { country: 'US' } }, 1);
    expect(us.isHoliday(day(2026, 11, 26))).toBe(true);
    expect(us.isHoliday(day(2026, 11, 19))).toBe(false);
  });

  it('the flag is taken on the local date: 2026-10-02 22:30 UTC is already 2026-10-03 in Berlin', () => {
    const cal = de();
    const out = new Float64Array(cal.size);
    cal.encode(Date.UTC(2026, 9, 2, 22, 30), out, 0);
    expect(out[cal.names.indexOf('holiday_d0')]).toBe(1);
    cal.encode(Date.UTC(2026, 9, 2, 21, 30), out, 0); // 23:30 on the 2nd: the holiday is tomorrow
    expect(out[cal.names.indexOf('holiday_d0')]).toBe(0);
    expect(out[cal.names.indexOf('holiday_d1')]).toBe(1);
  });

  it('extra dates (shutdowns, local events) are flagged like holidays; malformed ones are rejected', () => {
    const cal = de(['2026-07-20']);
    expect(cal.isHoliday(day(2026, 7, 20))).toBe(true);
    expect(cal.isHoliday(day(2026, 7, 21))).toBe(false);
    const noRegion = new CalendarEncoder('Europe/Berlin', { ...ALL, extraDates: ['2026-07-20'] }, 1);
    expect(noRegion.names).toContain('holiday_d0');
    expect(noRegion.isHoliday(day(2026, 7, 20))).toBe(true);
    for (const bad of ['2026-02-30', '2026-7-20', '20.07.2026']) {
      expect(() => de([bad])).toThrow(SeriesError);
    }
  });

  it('unknown country, state or region is UNKNOWN_HOLIDAY_REGION', () => {
    const mk = (holidays: CalendarOptions['holidays']) => () => new CalendarEncoder('Europe/Berlin', { ...ALL, holidays }, 1, 'tarrow-hill');
    for (const h of [{ country: 'XX' }, { country: 'DE', state: 'ZZ' }, { country: 'DE', state: 'BY', region: 'nowhere' }]) {
      try {
        mk(h)();
        expect.unreachable();
      } catch (e) {
        expect(e).toBeInstanceOf(SeriesError);
        expect((e as SeriesError).code).toBe('UNKNOWN_HOLIDAY_REGION');
        expect((e as SeriesError).series).toBe('tarrow-hill');
      }
    }
  });

  it('no holiday features without holidays or extra dates', () => {
    expect(new CalendarEncoder('Europe/Berlin', ALL, 2).names).toEqual(['hour_sin', 'hour_cos', 'dow_sin', 'dow_cos', 'doy_sin', 'doy_cos']);
  });
});
