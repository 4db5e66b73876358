import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { csvField, parseReadingsCsv, parseTimestamp, splitCsvLine } from '../../../src/cli/csv.ts';

const ms = (s: string) => {
  const r = parseTimestamp(s);
  if (!r.ok) throw new Error(r.message);
  return r.ms;
};

describe('timestamps', () => {
  it('RFC 3339 section 5.8 examples (quoted from memory)', () => {
    expect(ms('1985-04-12T23:20:50.52Z')).toBe(Date.UTC(1985, 3, 12, 23, 20, 50, 520));
    expect(ms('1996-12-19T16:39:57-08:00')).toBe(Date.UTC(1996, 11, 20, 0, 39, 57));
    expect(ms('1937-01-01T12:00:27.87+00:20')).toBe(Date.UTC(1937, 0, 1, 11, 40, 27, 870));
    // The leap-second examples (1990-12-31T23:59:60Z) cannot be represented in epoch ms: refused with a hint.
    const leap = parseTimestamp('1990-12-31T23:59:60Z');
    expect(leap.ok).toBe(false);
    if (!leap.ok) expect(leap.hint).toContain('leap');
  });

  it('agrees with the ECMAScript Date parser on ISO strings with offsets (property)', () => {
    fc.assert(
      fc.property(fc.integer({ min: Date.UTC(1971, 0, 1), max: Date.UTC(2090, 0, 1) }), fc.integer({ min: -14 * 4, max: 14 * 4 }), (t, q) => {
        const offMin = q * 15;
        const local = new Date(t + offMin * 60_000).toISOString().slice(0, 23);
        const sign = offMin < 0 ? '-' : '+';
        const a = Math.abs(offMin);
        const text = `${local}${sign}${String(Math.floor(a / 60)).padStart(2, '0')}:${String(a % 60).padStart(2, '0')}`;
        return ms(text) === Date.parse(text) && ms(text) === t;
      }),
    );
  });

  it('epoch seconds and milliseconds (1.7e9 s is 2023-11-14T22:13:20Z, from memory)', () => {
    expect(ms('1700000000')).toBe(Date.UTC(2023, 10, 14, 22, 13, 20));
    expect(ms('1700000000000')).toBe(Date.UTC(2023, 10, 14, 22, 13, 20));
    expect(ms('1700000000.5')).toBe(1_700_000_000_500);
    expect(parseTimestamp('1700000000', 'ms')).toEqual({ ok: true, ms: 1_700_000_000 });
  });

  it('refuses local times without offset, impossible dates and junk, each with a hint', () => {
    for (const bad of ['2025-03-30T02:30:00', '2025-02-29T00:00:00Z', '2024-13-01T00:00Z', '2025-01-01T24:00Z', 'yesterday', '', '2025-01-01T00:00+25:00']) {
      const r = parseTimestamp(bad);
      expect(r.ok, bad).toBe(false);
      if (!r.ok) expect(r.hint.length).toBeGreaterThan(5);
    }
    expect(ms('2024-02-29T00:00:00Z')).toBe(Date.UTC(2024, 1, 29)); // 2024 is a leap year (Gregorian rule)
  });
});

describe('CSV fields (RFC 4180 quoting)', () => {
  it('splits quoted fields with commas and doubled quotes', () => {
    expect(splitCsvLine('a,"b,c","d""e",', ',')).toEqual(['a', 'b,c', 'd"e', '']);
    expect(splitCsvLine('"open', ',')).toBeNull();
    expect(splitCsvLine('x;1,5', ';')).toEqual(['x', '1,5']);
  });
  it('csvField and splitCsvLine round-trip any text (property)', () => {
    fc.assert(fc.property(fc.array(fc.string(), { minLength: 1, maxLength: 5 }), (fields) => {
      const line = fields.map(csvField).join(',');
      if (/[\r\n]/.test(line)) return true; // multi-line fields are not used in readings files
      expect(splitCsvLine(line, ',')).toEqual(fields);
      return true;
    }));
  });
});

describe('readings CSV', () => {
  it('reads a header, named columns, missing values and repeated timestamps (last kept)', () => {
    const r = parseReadingsCsv('# meter export\ntime,kw\n2025-01-01T00:00:00+01:00,412.5\n2025-01-01T01:00:00+01:00,\n\n2025-01-01T00:00:00+01:00,415\n');
    expect(r.issueCount).toBe(0);
    expect(r.header).toEqual(['time', 'kw']);
    expect(r.rows).toBe(3);
    expect(r.duplicates).toBe(1);
    expect(r.missing).toBe(1);
    expect(r.readings[0]).toEqual({ t: Date.UTC(2024, 11, 31, 23), v: 415 });
    expect(r.readings[1].v).toBeNaN();
  });

  it('headerless files use the first two columns; semicolon files accept decimal commas', () => {
    expect(parseReadingsCsv('1700000000,1\n1700003600,2\n').readings.map((x) => x.v)).toEqual([1, 2]);
    const r = parseReadingsCsv('zeit;wert\n2025-01-01T00:00:00Z;12,5\n');
    expect(r.delimiter).toBe(';');
    expect(r.readings[0].v).toBe(12.5);
  });

  it('columns can be chosen by name or index', () => {
    const text = 'site,value,timestamp\nn,1,2025-01-01T00:00:00Z\n';
    expect(parseReadingsCsv(text).readings).toEqual([{ t: Date.UTC(2025, 0, 1), v: 1 }]);
    expect(parseReadingsCsv(text, { timeColumn: '3', valueColumn: 'value' }).readings).toHaveLength(1);
    expect(parseReadingsCsv(text, { valueColumn: 'nope' }).issues[0].code).toBe('CSV_HEADER');
  });

  it('names the line of every bad row', () => {
    const text = ['timestamp,value', '2025-01-01T00:00:00Z,1', '2025-01-01T01:00:00,2', '2025-01-01T02:00:00Z,abc', '2025-01-01T03:00:00Z', '"2025-01-01T04:00:00Z,5', '2025-01-01T05:00:00Z,Infinity'].join('\n');
    const r = parseReadingsCsv(text);
    expect(r.issues.map((i) => [i.line, i.code])).toEqual([[3, 'CSV_TIME'], [4, 'CSV_VALUE'], [5, 'CSV_COLUMNS'], [6, 'CSV_QUOTE'], [7, 'CSV_VALUE']]);
  });

  it('caps the issue list but keeps counting', () => {
    const text = 'timestamp,value\n' + Array.from({ length: 50 }, () => 'bad,1').join('\n');
    const r = parseReadingsCsv(text, { maxIssues: 5 });
    expect(r.issues).toHaveLength(5);
    expect(r.issueCount).toBe(50);
  });

  it('an empty file or a header alone is an issue', () => {
    expect(parseReadingsCsv('').issues[0].code).toBe('CSV_EMPTY');
    expect(parseReadingsCsv('timestamp,value\n').issues[0].code).toBe('CSV_EMPTY');
  });
});
