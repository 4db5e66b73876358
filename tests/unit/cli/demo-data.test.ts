import { describe, expect, it } from 'vitest';
import { readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { DEMO_DIR, generate, HOURS, SERIES, TEMP, type Manifest } from '../../../demo-data/generate.ts';
import { parseReadingsCsv } from '../../../src/cli/csv.ts';

const HOUR = 3_600_000;

describe('demo data', () => {
  const { csv, manifest } = generate();

  it('the committed files are exactly what the seeded generator writes, under 2 MB', () => {
    let bytes = 0;
    for (const [name, text] of Object.entries(csv)) {
      const file = join(DEMO_DIR, `${name}.csv`);
      expect(readFileSync(file, 'utf8'), name).toBe(text);
      bytes += statSync(file).size;
    }
    expect(JSON.parse(readFileSync(join(DEMO_DIR, 'manifest.json'), 'utf8'))).toEqual(JSON.parse(JSON.stringify(manifest)));
    expect(bytes).toBeLessThan(2e6);
  });

  it('every file imports cleanly; the gaps are where the manifest says', () => {
    const m = manifest as Manifest;
    for (const name of [...SERIES, TEMP]) {
      const r = parseReadingsCsv(csv[name]);
      expect(r.issueCount, name).toBe(0);
      expect(r.duplicates, name).toBe(0);
      const gapHours = m.gaps.filter((g) => g.series === name).reduce((a, g) => a + g.hours, 0);
      expect(r.readings.length, name).toBe(HOURS - gapHours);
      // Hourly grid in UTC across both daylight-saving changes: consecutive readings are 1 h apart except at gaps.
      const ts = r.readings.map((x) => x.t);
      const jumps = ts.slice(1).map((t, i) => t - ts[i]).filter((d) => d !== HOUR);
      expect(jumps, name).toEqual(m.gaps.filter((g) => g.series === name).map((g) => (g.hours + 1) * HOUR));
    }
  });

  it('the load is higher in the cold half of the year and lower on public holidays', () => {
    const north = parseReadingsCsv(csv['oskaveld-north']).readings;
    const temp = parseReadingsCsv(csv[TEMP]).readings;
    const mean = (xs: number[]) => xs.reduce((a, b) => a + b, 0) / xs.length;
    const month = (t: number) => new Date(t).getUTCMonth();
    expect(mean(north.filter((r) => month(r.t) === 0).map((r) => r.v))).toBeGreaterThan(2 * mean(north.filter((r) => month(r.t) === 6).map((r) => r.v)));
    expect(mean(temp.filter((r) => month(r.t) === 0).map((r) => r.v))).toBeLessThan(mean(temp.filter((r) => month(r.t) === 6).map((r) => r.v)) - 10);
    // brennick-yard (workshops): a German public holiday on a weekday (2025-05-01, Labour Day) is well below the working days around it.
    const yard = parseReadingsCsv(csv['brennick-yard']).readings;
    const day = (iso: string) => mean(yard.filter((r) => r.t >= Date.parse(iso) && r.t < Date.parse(iso) + 24 * HOUR).map((r) => r.v));
    expect(manifest.holidays).toContain('2025-05-01');
    expect(day('2025-04-30T00:00:00+02:00')).toBeGreaterThan(1.2 * day('2025-05-01T00:00:00+02:00'));
  });

  it('tarrow-hill (heating response x1.6 from the shift) rises well above its neighbours in the last three weeks', () => {
    const from = Date.parse(manifest.shift.from);
    const ratio = (name: string) => {
      const rs = parseReadingsCsv(csv[name]).readings;
      const after = rs.filter((r) => r.t >= from + 24 * HOUR).map((r) => r.v);
      const before = rs.filter((r) => r.t >= from - 21 * 24 * HOUR && r.t < from).map((r) => r.v);
      return after.reduce((a, b) => a + b, 0) / after.length / (before.reduce((a, b) => a + b, 0) / before.length);
    };
    expect(ratio('tarrow-hill') / ratio('oskaveld-north')).toBeGreaterThan(1.15);
  });
});
