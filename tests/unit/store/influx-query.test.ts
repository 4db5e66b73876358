/**
 * Query text built from selectors: InfluxQL (v1) and Flux (v2). The property tests decode the
 * query the way the server's scanner would (tests/helpers/query-decoders.ts, which names its
 * sources) and check that (a) the query outside string literals is exactly the one a harmless
 * selector gives, and (b) each literal decodes back to the selector value, whatever quotes,
 * backslashes, newlines or "${" the value contains.
 */
import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { buildReadQuery, parseQueryAnswer, quoteIdent, quoteString } from '../../../src/store/influx/influxql.ts';
import { buildFluxQuery, parseFluxTime } from '../../../src/store/influx/flux.ts';
import { resolveSelector, type ResolvedSelector } from '../../../src/store/influx/selector.ts';
import { StoreError } from '../../../src/store/influx/errors.ts';
import { splitFlux, splitInfluxQL } from '../../helpers/query-decoders.ts';

const FROM = Date.UTC(2026, 0, 5);
const TO = Date.UTC(2026, 0, 12);

/** Strings made mostly of the characters that break naive quoting. */
const hostile = fc.string({
  unit: fc.oneof(
    fc.constantFrom('"', "'", '\\', '\n', '\r', '\t', '$', '{', '}', '`', ';', ' ', ',', '=', '|', '>', '/', '*', ')', '(', 'x', 'é', '\u2028', '\u0000'),
    fc.string({ unit: 'binary', minLength: 1, maxLength: 1 }),
  ),
  minLength: 1,
  maxLength: 24,
});

const tagsArb = fc.dictionary(hostile, hostile, { maxKeys: 3 });

/** The same selector shape with harmless placeholder names P0, P1, … in every position. */
function placeholders(rs: ResolvedSelector): { benign: ResolvedSelector; values: Map<string, string> } {
  const values = new Map<string, string>();
  let n = 0;
  const ph = (v: string) => {
    const key = `P${n++}`;
    values.set(key, v);
    return key;
  };
  return {
    benign: { ...rs, measurement: ph(rs.measurement), field: ph(rs.field), tags: rs.tags.map(([k, v]) => [ph(k), ph(v)]) },
    values,
  };
}

describe('selector defaults and checks', () => {
  it('reads field "value" of the measurement named like the series unless told otherwise; tags sorted', () => {
    expect(resolveSelector({ name: 'oskaveld-north' }, 'v1')).toEqual({ series: 'oskaveld-north', measurement: 'oskaveld-north', field: 'value', tags: [], aggregateMs: 0 });
    expect(resolveSelector({ name: 'n', measurement: 'heat', field: 'kw', tags: { zone: 'b', site: 'a' }, aggregateMs: 600_000 }, 'v2').tags).toEqual([
      ['site', 'a'],
      ['zone', 'b'],
    ]);
  });

  it('refuses what the query language cannot express, with SELECTOR_INVALID (not retryable)', () => {
    const cases: [Parameters<typeof resolveSelector>[0], 'v1' | 'v2'][] = [
      [{ name: 'a', measurement: '' }, 'v1'],
      [{ name: 'a', field: '' }, 'v2'],
      [{ name: 'a', tags: { '': 'x' } }, 'v1'],
      [{ name: 'a', field: 'Time' }, 'v1'],
      [{ name: 'a', tags: { time: 'x' } }, 'v1'],
      [{ name: 'a', tags: { k: 'x\ry' } }, 'v1'],
      [{ name: 'a', measurement: 'm\u0000' }, 'v1'],
      [{ name: 'a', tags: { _field: 'x' } }, 'v2'],
      [{ name: 'a', aggregateMs: 1.5 }, 'v2'],
      [{ name: 'a', aggregateMs: -1 }, 'v1'],
    ];
    for (const [sel, api] of cases) {
      let thrown: unknown;
      try {
        resolveSelector(sel, api);
      } catch (e) {
        thrown = e;
      }
      expect(thrown, JSON.stringify(sel)).toBeInstanceOf(StoreError);
      expect((thrown as StoreError).code).toBe('SELECTOR_INVALID');
      expect((thrown as StoreError).canRetry()).toBe(false);
      expect((thrown as StoreError).series).toBe('a');
    }
    // CR and "time" are fine in Flux.
    expect(() => resolveSelector({ name: 'a', field: 'time', tags: { k: 'x\ry' } }, 'v2')).not.toThrow();
  });
});

describe('InfluxQL read query', () => {
  it('selects the typed field over [from, to) with typed tag filters', () => {
    const rs = resolveSelector({ name: 'n', measurement: 'heat', field: 'load_kw', tags: { substation: 'oskaveld-north' } }, 'v1');
    expect(buildReadQuery(rs, FROM, TO)).toBe(
      `SELECT "load_kw"::field AS "value" FROM "heat" WHERE time >= ${FROM}ms AND time < ${TO}ms AND "substation"::tag = 'oskaveld-north'`,
    );
    expect(buildReadQuery({ ...rs, aggregateMs: 900_000 }, FROM, TO, 'one_year')).toBe(
      `SELECT mean("load_kw"::field) AS "value" FROM "one_year"."heat" WHERE time >= ${FROM}ms AND time < ${TO}ms AND "substation"::tag = 'oskaveld-north' GROUP BY time(900000ms) fill(none)`,
    );
  });

  it('quotes identifiers and strings', () => {
    expect(quoteIdent('a"b\\c\nd')).toBe('"a\\"b\\\\c\\nd"');
    expect(quoteString("it's \\ \n")).toBe("'it\\'s \\\\ \\n'");
  });

  it('a hostile selector changes nothing but the literal contents', () => {
    fc.assert(
      fc.property(hostile, hostile, tagsArb, fc.option(hostile), fc.constantFrom(0, 3_600_000), (measurement, field, tags, rp, aggregateMs) => {
        let rs: ResolvedSelector;
        try {
          rs = resolveSelector({ name: 'probe', measurement, field, tags, aggregateMs }, 'v1');
        } catch (e) {
          // Only what InfluxQL cannot express is refused.
          expect((e as StoreError).code).toBe('SELECTOR_INVALID');
          const all = [measurement, field, ...Object.keys(tags), ...Object.values(tags)];
          expect(all.some((s) => /[\r\u0000]/.test(s)) || field.toLowerCase() === 'time' || Object.keys(tags).some((k) => k.toLowerCase() === 'time')).toBe(true);
          return;
        }
        if (rp !== null && /[\r\u0000]/.test(rp)) return;
        const { benign, values } = placeholders(rs);
        const rpPh = rp === null ? undefined : 'RP';
        if (rp !== null) values.set('RP', rp);
        const got = splitInfluxQL(buildReadQuery(rs, FROM, TO, rp ?? undefined));
        const ref = splitInfluxQL(buildReadQuery(benign, FROM, TO, rpPh));
        expect(got.skeleton).toBe(ref.skeleton);
        expect(got.literals).toEqual(ref.literals.map((l) => values.get(l) ?? l));
      }),
      { numRuns: 400 },
    );
  });
});

describe('Flux read query (client flux template)', () => {
  it('filters measurement, field and tags inside range, optionally mean per window', () => {
    const rs = resolveSelector({ name: 'n', measurement: 'heat', field: 'load_kw', tags: { substation: 'brennick-yard' }, aggregateMs: 3_600_000 }, 'v2');
    expect(buildFluxQuery('plant', rs, FROM, TO).toString()).toBe(
      [
        'from(bucket: "plant")',
        `  |> range(start: ${new Date(FROM).toISOString()}, stop: ${new Date(TO).toISOString()})`,
        '  |> filter(fn: (r) => r._measurement == "heat" and r._field == "load_kw" and r["substation"] == "brennick-yard")',
        '  |> aggregateWindow(every: 3600000ms, fn: mean, createEmpty: false, timeSrc: "_start")',
        '  |> keep(columns: ["_time", "_value"])',
      ].join('\n'),
    );
    expect(buildFluxQuery('plant', { ...rs, aggregateMs: 0 }, FROM, TO).toString()).not.toContain('aggregateWindow');
  });

  it('a hostile selector or bucket changes nothing but the literal contents', () => {
    fc.assert(
      fc.property(hostile, hostile, hostile, tagsArb, fc.constantFrom(0, 600_000), (bucket, measurement, field, tags, aggregateMs) => {
        let rs: ResolvedSelector;
        try {
          rs = resolveSelector({ name: 'probe', measurement, field, tags, aggregateMs }, 'v2');
        } catch (e) {
          expect((e as StoreError).code).toBe('SELECTOR_INVALID');
          expect(Object.keys(tags).some((k) => ['_measurement', '_field', '_value', '_time', '_start', '_stop', 'result', 'table'].includes(k))).toBe(true);
          return;
        }
        const { benign, values } = placeholders(rs);
        values.set('BUCKET', bucket);
        const got = splitFlux(buildFluxQuery(bucket, rs, FROM, TO).toString());
        const ref = splitFlux(buildFluxQuery('BUCKET', benign, FROM, TO).toString());
        expect(got.skeleton).toBe(ref.skeleton);
        expect(got.literals).toEqual(ref.literals.map((l) => values.get(l) ?? l));
      }),
      { numRuns: 400 },
    );
  });
});

describe('answer parsing', () => {
  it('joins chunked InfluxQL answers; numbers stay, booleans 1/0, strings NaN; no series = no readings', () => {
    const body = [
      JSON.stringify({ results: [{ statement_id: 0, series: [{ name: 'heat', columns: ['time', 'value'], values: [[1000, 1.5], [2000, true]], partial: true }], partial: true }] }),
      JSON.stringify({ results: [{ statement_id: 0, series: [{ name: 'heat', columns: ['time', 'value'], values: [[3000, 'warm'], [4000, null]] }] }] }),
      '',
    ].join('\n');
    const got = parseQueryAnswer(body, 's', 'POST /query');
    expect(got.map((r) => r.t)).toEqual([1000, 2000, 3000, 4000]);
    expect(got.map((r) => r.v)).toEqual([1.5, 1, NaN, NaN]);
    expect(parseQueryAnswer('{"results":[{"statement_id":0}]}', 's', 'POST /query')).toEqual([]);
  });

  it('maps statement errors to typed errors', () => {
    const err = (body: string) => {
      try {
        parseQueryAnswer(body, 'tarrow-hill', 'POST /query');
      } catch (e) {
        return e as StoreError;
      }
      throw new Error('no error');
    };
    const missing = err('{"results":[{"statement_id":0,"error":"database not found: plant"}]}');
    expect([missing.code, missing.canRetry(), missing.series]).toEqual(['STORE_DATABASE_MISSING', true, 'tarrow-hill']);
    const text = err('{"results":[{"statement_id":0,"error":"unsupported mean iterator type: *query.stringInterruptIterator"}]}');
    expect([text.code, text.canRetry()]).toEqual(['QUERY_REJECTED', false]);
    expect(text.hint).toMatch(/numeric/);
    expect(err('{"error":"error parsing query: found x"}').code).toBe('QUERY_REJECTED');
    expect(err('<html>proxy error</html>').code).toBe('STORE_PROTOCOL');
  });

  it('reads RFC 3339 times with nanosecond fractions', () => {
    expect(parseFluxTime('2026-01-05T06:00:00Z')).toBe(Date.UTC(2026, 0, 5, 6));
    expect(parseFluxTime('2026-01-05T06:00:00.123456789Z')).toBe(Date.UTC(2026, 0, 5, 6, 0, 0, 123));
    expect(parseFluxTime('2026-01-05T07:00:00.5+01:00')).toBe(Date.UTC(2026, 0, 5, 6, 0, 0, 500));
  });
});
