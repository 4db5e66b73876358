/**
 * Hostile selectors against a real InfluxDB 1.x: InfluxQL accepts several statements in one
 * request, so a badly quoted name could drop data. Here the server itself judges the escaping:
 *  - any selector reads either nothing ("no such series") or is refused before a request
 *    (SELECTOR_INVALID); the server never reports a parse error and nothing is changed;
 *  - names that line protocol can carry, written with the client's Point, read back exactly.
 * The Flux counterpart (no Flux server installs here) is in influx-flux-read.test.ts.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { Point } from '@influxdata/influxdb-client';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { createInfluxStore, StoreError, type InfluxStore } from '../../src/store/influx/index.ts';

const H = 3_600_000;
const DB = 'oskaveld';
const T0 = Date.UTC(2026, 0, 12, 6);
let influx: Influx1Server;
let store: InfluxStore;

beforeAll(async () => {
  influx = await startInflux1();
  await influx.query(`CREATE DATABASE ${DB}`);
  await influx.writeLines(DB, [`heat,substation=oskaveld-north load_kw=812.5 ${T0}`, `heat,substation=brennick-yard load_kw=301 ${T0}`]);
  store = createInfluxStore({ api: 'v1', url: influx.url, database: DB });
});

afterAll(async () => {
  await store?.close();
  await influx?.close();
});

async function databaseIntact(): Promise<void> {
  const dbs = (await influx.query('SHOW DATABASES')).results[0]?.series?.[0]?.values.map((v) => v[0]);
  expect(dbs).toContain(DB);
  expect(await store.readReadings({ name: 'oskaveld-north', measurement: 'heat', field: 'load_kw', tags: { substation: 'oskaveld-north' } }, T0, T0 + 1)).toEqual([{ t: T0, v: 812.5 }]);
  const series = (await influx.query('SHOW SERIES FROM "heat"', DB)).results[0]?.series?.[0]?.values.map((v) => v[0]);
  expect(series).toEqual(['heat,substation=brennick-yard', 'heat,substation=oskaveld-north']);
}

const hostileChar = fc.constantFrom('"', "'", '\\', '\n', '\r', '\t', ';', '-', ' ', ',', '=', '(', ')', '*', '/', '$', '{', '}', '\u0000', 'x', 'é', '🔥');
const hostile = fc.string({ unit: hostileChar, minLength: 1, maxLength: 20 });

describe('InfluxQL injection (real influxd)', () => {
  it('classic payloads find nothing and change nothing', async () => {
    const payloads = [
      `x'; DROP DATABASE ${DB}; --`,
      `heat" ; DROP MEASUREMENT "heat`,
      `load_kw"::field FROM "heat"; DROP SERIES FROM "heat"; SELECT "x`,
      `oskaveld-north' OR '1'='1`,
      `\\'; DROP DATABASE ${DB}; SELECT '`,
      `a\\"; DROP DATABASE ${DB}; --`,
      `x\n; DROP DATABASE ${DB}`,
    ];
    for (const p of payloads) {
      expect(await store.readReadings({ name: 'probe', measurement: p }, T0 - H, T0 + H)).toEqual([]);
      expect(await store.readReadings({ name: 'probe', measurement: 'heat', field: p }, T0 - H, T0 + H)).toEqual([]);
      expect(await store.readReadings({ name: 'probe', measurement: 'heat', field: 'load_kw', tags: { substation: p } }, T0 - H, T0 + H)).toEqual([]);
      expect(await store.readReadings({ name: 'probe', measurement: 'heat', field: 'load_kw', tags: { [p]: 'oskaveld-north' }, aggregateMs: H }, T0 - H, T0 + H)).toEqual([]);
    }
    await databaseIntact();
  });

  it('any selector: no readings or SELECTOR_INVALID, never a server error', async () => {
    await fc.assert(
      fc.asyncProperty(hostile, hostile, fc.dictionary(hostile, hostile, { maxKeys: 2 }), fc.constantFrom(0, H), async (measurement, field, tags, aggregateMs) => {
        try {
          const got = await store.readReadings({ name: 'probe', measurement, field, tags, aggregateMs }, T0 - H, T0 + H);
          expect(got).toEqual([]);
        } catch (err) {
          expect(err).toBeInstanceOf(StoreError);
          expect((err as StoreError).code).toBe('SELECTOR_INVALID');
        }
      }),
      { numRuns: 100 },
    );
    await databaseIntact();
  });

  it('every selector InfluxQL can express reaches the server and finds nothing', async () => {
    // Without CR and NUL (which InfluxQL cannot express, see above) every query must run.
    const expressible = fc.string({ unit: hostileChar.filter((c) => c !== '\r' && c !== '\u0000'), minLength: 1, maxLength: 20 });
    let ran = 0;
    await fc.assert(
      fc.asyncProperty(expressible, expressible, fc.dictionary(expressible, expressible, { maxKeys: 2 }), fc.constantFrom(0, H), async (measurement, field, tags, aggregateMs) => {
        fc.pre(field.toLowerCase() !== 'time' && !Object.keys(tags).some((k) => k.toLowerCase() === 'time'));
        expect(await store.readReadings({ name: 'probe', measurement, field, tags, aggregateMs }, T0 - H, T0 + H)).toEqual([]);
        ran++;
      }),
      { numRuns: 150 },
    );
    expect(ran).toBe(150);
    await databaseIntact();
  });

  it('names line protocol can carry, written with the client Point, read back exactly', async () => {
    // Line protocol (InfluxDB 1.x) escapes comma, space and equals sign in names; it cannot carry
    // control characters or a backslash next to those (from memory of the line protocol
    // reference), and a measurement starting with "#" is a comment. Those are left out here.
    const unit = fc.constantFrom('"', "'", ';', '-', ' ', ',', '=', '(', ')', '*', '/', '$', '{', '}', 'x', 'Z', '7', 'é', '🔥');
    const name = fc.string({ unit, minLength: 1, maxLength: 16 });
    let k = 0;
    await fc.assert(
      // influxd answers -0 as 0 (seen in a CI run: the sign of a zero float field is not kept), so -0 is mapped to 0.
      fc.asyncProperty(name, name, name, name, fc.double({ min: -1e6, max: 1e6, noNaN: true }).map((v) => (Object.is(v, -0) ? 0 : v)), async (measurement, field, tagKey, tagValue, value) => {
        fc.pre(field.toLowerCase() !== 'time' && tagKey.toLowerCase() !== 'time');
        const t = T0 + 10 * H + ++k * 1_000;
        const line = new Point(measurement).tag(tagKey, tagValue).floatField(field, value).timestamp(t).toLineProtocol({ convertTime: (v) => String(v) })!;
        await influx.writeLines(DB, [line]);
        const got = await store.readReadings({ name: 'probe', measurement, field, tags: { [tagKey]: tagValue } }, t, t + 1);
        expect(got).toEqual([{ t, v: value }]);
      }),
      { numRuns: 60 },
    );
    await databaseIntact();
  });
});
