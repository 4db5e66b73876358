/**
 * Local time of UTC instants in an IANA time zone, via Intl (the tz database shipped with Node).
 * Intl is slow (microseconds per call), so offsets are cached per UTC day, and per UTC hour on
 * the few days whose offset changes (DST, zone rule changes). A 23- or 25-hour local day is then
 * exact: every instant gets the offset that applies at that instant.
 */
import { SeriesError } from './errors.ts';

export const HOUR_MS = 3_600_000;
export const DAY_MS = 86_400_000;
/** Bound on cached days/hours per zone; the cache is cleared when it grows past it. */
const CACHE_LIMIT = 200_000;

/** Days since 1970-01-01 of a proleptic Gregorian civil date (H. Hinnant's days_from_civil). */
export function daysFromCivil(y: number, m: number, d: number): number {
  const yy = m <= 2 ? y - 1 : y;
  const era = Math.floor(yy / 400);
  const yoe = yy - era * 400;
  const mp = (m + 9) % 12;
  const doy = Math.floor((153 * mp + 2) / 5) + d - 1;
  const doe = yoe * 365 + Math.floor(yoe / 4) - Math.floor(yoe / 100) + doy;
  return era * 146097 + doe - 719468;
}

/** Civil date of a day number (inverse of daysFromCivil; H. Hinnant's civil_from_days). */
export function civilFromDays(days: number): { y: number; m: number; d: number } {
  const z = days + 719468;
  const era = Math.floor(z / 146097);
  const doe = z - era * 146097;
  const yoe = Math.floor((doe - Math.floor(doe / 1460) + Math.floor(doe / 36524) - Math.floor(doe / 146096)) / 365);
  const doy = doe - (365 * yoe + Math.floor(yoe / 4) - Math.floor(yoe / 100));
  const mp = Math.floor((5 * doy + 2) / 153);
  const d = doy - Math.floor((153 * mp + 2) / 5) + 1;
  const m = mp < 10 ? mp + 3 : mp - 9;
  return { y: m <= 2 ? era * 400 + yoe + 1 : era * 400 + yoe, m, d };
}

export function isLeapYear(y: number): boolean {
  return (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;
}

export class ZoneClock {
  readonly timeZone: string;
  #fmt: Intl.DateTimeFormat;
  /** UTC day number -> offset in ms, or NaN when the offset changes during that day. */
  #dayOffset = new Map<number, number>();
  /** UTC hour number -> offset in ms, or NaN when it changes during that hour. */
  #hourOffset = new Map<number, number>();
  /** Intl calls made (for benchmarks and tests of the cache). */
  intlCalls = 0;

  constructor(timeZone: string) {
    this.timeZone = timeZone;
    this.#fmt = new Intl.DateTimeFormat('en-US', {
      timeZone,
      hourCycle: 'h23',
      year: 'numeric',
      month: 'numeric',
      day: 'numeric',
      hour: 'numeric',
      minute: 'numeric',
      second: 'numeric',
      era: 'short',
    });
  }

  /** Offset local - UTC in ms at instant tMs, straight from Intl (whole seconds). */
  offsetFromIntl(tMs: number): number {
    this.intlCalls++;
    const sec = Math.floor(tMs / 1000) * 1000;
    let y = 0, mo = 0, d = 0, h = 0, mi = 0, s = 0, bc = false;
    for (const p of this.#fmt.formatToParts(sec)) {
      switch (p.type) {
        case 'year': y = Number(p.value); break;
        case 'month': mo = Number(p.value); break;
        case 'day': d = Number(p.value); break;
        case 'hour': h = Number(p.value); break;
        case 'minute': mi = Number(p.value); break;
        case 'second': s = Number(p.value); break;
        case 'era': bc = p.value === 'BC' || p.value === 'B'; break;
        default: break;
      }
    }
    if (bc) y = 1 - y;
    const local = daysFromCivil(y, mo, d) * DAY_MS + h * HOUR_MS + mi * 60_000 + s * 1000;
    return local - sec;
  }

  /** Offset local - UTC in ms at instant tMs (cached). */
  offsetMs(tMs: number): number {
    const day = Math.floor(tMs / DAY_MS);
    let off = this.#dayOffset.get(day);
    if (off === undefined) {
      if (this.#dayOffset.size > CACHE_LIMIT) this.#dayOffset.clear();
      const a = this.offsetFromIntl(day * DAY_MS);
      const b = this.offsetFromIntl(day * DAY_MS + DAY_MS - 1000);
      // Two changes within one UTC day that cancel out do not occur in the tz database.
      off = a === b ? a : NaN;
      this.#dayOffset.set(day, off);
    }
    if (!Number.isNaN(off)) return off;
    const hour = Math.floor(tMs / HOUR_MS);
    let hOff = this.#hourOffset.get(hour);
    if (hOff === undefined) {
      if (this.#hourOffset.size > CACHE_LIMIT) this.#hourOffset.clear();
      const a = this.offsetFromIntl(hour * HOUR_MS);
      const b = this.offsetFromIntl(hour * HOUR_MS + HOUR_MS - 1000);
      hOff = a === b ? a : NaN;
      this.#hourOffset.set(hour, hOff);
    }
    // The change falls inside this hour (zones with :30/:45 offsets): ask Intl for the instant.
    return Number.isNaN(hOff) ? this.offsetFromIntl(tMs) : hOff;
  }

  /** Local wall-clock time of tMs as "epoch ms of the local civil time" (local midnight = multiple of DAY_MS). */
  localMs(tMs: number): number {
    return tMs + this.offsetMs(tMs);
  }
}

const clocks = new Map<string, ZoneClock>();

/** Shared clock per zone (caches are shared by all series in that zone). Throws UNKNOWN_TIME_ZONE. */
export function zoneClock(timeZone: string, series = '(unnamed)'): ZoneClock {
  let c = clocks.get(timeZone);
  if (c === undefined) {
    try {
      c = new ZoneClock(timeZone);
    } catch {
      throw new SeriesError({
        code: 'UNKNOWN_TIME_ZONE',
        series,
        field: 'timeZone',
        message: `"${timeZone}" is not an IANA time zone known to this Node runtime`,
        hint: 'use a name like Europe/Berlin or America/New_York (see Intl.supportedValuesOf("timeZone"))',
      });
    }
    clocks.set(timeZone, c);
  }
  return c;
}
