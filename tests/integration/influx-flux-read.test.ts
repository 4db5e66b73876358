/**
 * The Flux read path (v2 mode) against a small local HTTP server that checks the Flux text it
 * receives and answers in InfluxDB's annotated-CSV format.
 *
 * This is the one path without a real server: no server that speaks Flux can be installed here
 * (InfluxDB 1.6 from Debian has no /api/v2/query, VictoriaMetrics does not run Flux, InfluxDB 2.x
 * is not packaged for Debian). The answers follow the annotated-CSV layout of InfluxDB 2.x query
 * answers (#datatype / #group / #default rows, a header row, one row per record, a blank line
 * between tables of different schema; InfluxDB "Annotated CSV" reference, from memory).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { createServer, type Server } from 'node:http';
import { splitFlux } from '../helpers/query-decoders.ts';
import { storeFailure } from '../helpers/store-errors.ts';
import { createInfluxStore, type InfluxStore, type InfluxV2Options } from '../../src/store/influx/index.ts';
import { buildFluxQuery } from '../../src/store/influx/flux.ts';
import { resolveSelector } from '../../src/store/influx/selector.ts';

const H = 3_600_000;
const FROM = Date.UTC(2026, 0, 12, 0);
const TO = Date.UTC(2026, 0, 13, 0);
const iso = (ms: number) => new Date(ms).toISOString().replace('.000Z', 'Z');

interface Received {
  path: string;
  org: string | null;
  authorization: string | undefined;
  query: string;
}

let server: Server;
let url = '';
const received: Received[] = [];
let respond: (r: Received) => { status: number; body: string; headers?: Record<string, string>; delayMs?: number } = () => ({ status: 200, body: '' });
const open: InfluxStore[] = [];

function store(over: Partial<InfluxV2Options> = {}): InfluxStore {
  const s = createInfluxStore({ api: 'v2', url, org: 'oskaveld-energy', bucket: 'heat', token: 'flux-test-token', ...over });
  open.push(s);
  return s;
}

beforeAll(async () => {
  server = createServer((req, res) => {
    const chunks: Buffer[] = [];
    req.on('data', (c: Buffer) => chunks.push(c));
    req.on('end', () => {
      const u = new URL(req.url ?? '/', 'http://x');
      let query = '';
      try {
        query = (JSON.parse(Buffer.concat(chunks).toString('utf8')) as { query: string }).query;
      } catch {
        /* not a query request */
      }
      const rec = { path: u.pathname, org: u.searchParams.get('org'), authorization: req.headers.authorization, query };
      received.push(rec);
      const a = respond(rec);
      const send = () => {
        res.writeHead(a.status, { 'content-type': a.status === 200 ? 'text/csv; charset=utf-8' : 'application/json', ...(a.headers ?? {}) });
        res.end(a.body);
      };
      if (a.delayMs) setTimeout(send, a.delayMs);
      else send();
    });
  });
  await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
  const addr = server.address();
  url = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
});

afterAll(async () => {
  for (const s of open) await s.close();
  server.closeAllConnections();
  await new Promise<void>((r) => server.close(() => r()));
});

/** Annotated CSV of tables with columns result, table, _time, _value. */
function csv(tables: { datatype: 'double' | 'long' | 'boolean' | 'string'; rows: [string, string][] }[][]): string {
  const blocks = tables.map((group) => {
    const head = [
      `#group,false,false,false,false`,
      `#datatype,string,long,dateTime:RFC3339,${group[0]!.datatype}`,
      `#default,_result,,,`,
      `,result,table,_time,_value`,
    ];
    let table = 0;
    const rows = group.flatMap((t) => t.rows.map(([time, value]) => `,,${table},${time},${value}`).concat(((table += 1), [])));
    return [...head, ...rows].join('\r\n');
  });
  return blocks.join('\r\n\r\n') + '\r\n\r\n';
}

describe('Flux read path', () => {
  it('sends the Flux of the selector with org and token, and reads tables of several schemas', async () => {
    const sel = { name: 'oskaveld-north', measurement: 'heat', field: 'load_kw', tags: { substation: 'oskaveld-north' } };
    const expected = buildFluxQuery('heat', resolveSelector(sel, 'v2'), FROM, TO).toString();
    respond = (r) => {
      if (r.query !== expected) return { status: 400, body: JSON.stringify({ code: 'invalid', message: 'unexpected query' }) };
      return {
        status: 200,
        body: csv([
          [
            { datatype: 'double', rows: [[iso(FROM), '812.5'], [iso(FROM + H), '799.25']] },
            { datatype: 'double', rows: [['2026-01-12T02:00:00.000000001Z', '780']] },
          ],
          [{ datatype: 'long', rows: [[iso(FROM + 3 * H), '777']] }],
        ]),
      };
    };
    received.length = 0;
    const got = await store().readReadings(sel, FROM, TO);
    expect(received).toHaveLength(1);
    expect(received[0]).toMatchObject({ path: '/api/v2/query', org: 'oskaveld-energy', authorization: 'Token flux-test-token' });
    expect(received[0]!.query).toBe(
      [
        'from(bucket: "heat")',
        '  |> range(start: 2026-01-12T00:00:00.000Z, stop: 2026-01-13T00:00:00.000Z)',
        '  |> filter(fn: (r) => r._measurement == "heat" and r._field == "load_kw" and r["substation"] == "oskaveld-north")',
        '  |> keep(columns: ["_time", "_value"])',
      ].join('\n'),
    );
    expect(got).toEqual([
      { t: FROM, v: 812.5 },
      { t: FROM + H, v: 799.25 },
      { t: FROM + 2 * H, v: 780 },
      { t: FROM + 3 * H, v: 777 },
    ]);
  });

  it('pushes the mean per window down with aggregateWindow', async () => {
    respond = (r) =>
      r.query.includes('|> aggregateWindow(every: 900000ms, fn: mean, createEmpty: false, timeSrc: "_start")')
        ? { status: 200, body: csv([[{ datatype: 'double', rows: [[iso(FROM), '3.5'], [iso(FROM + 900_000), '4']] }]]) }
        : { status: 400, body: JSON.stringify({ code: 'invalid', message: 'no aggregateWindow' }) };
    const got = await store().readReadings({ name: 'oskaveld-outdoor-temp', measurement: 'outdoor', field: 'celsius', aggregateMs: 900_000 }, FROM, FROM + H);
    expect(got).toEqual([
      { t: FROM, v: 3.5 },
      { t: FROM + 900_000, v: 4 },
    ]);
  });

  it('no tables = no such series = no readings; text values are NaN', async () => {
    respond = () => ({ status: 200, body: '\r\n' });
    expect(await store().readReadings({ name: 'nowhere' }, FROM, TO)).toEqual([]);
    respond = () => ({ status: 200, body: csv([[{ datatype: 'string', rows: [[iso(FROM), 'pump off']] }]]) });
    const got = await store().readReadings({ name: 'notes' }, FROM, TO);
    expect(got.length).toBe(1);
    expect(Number.isNaN(got[0]!.v)).toBe(true);
  });

  it('maps failures to typed errors the daemon can act on', async () => {
    const s = store({ timeoutMs: 300 });
    const sel = { name: 'brennick-yard' };
    respond = () => ({ status: 400, body: JSON.stringify({ code: 'invalid', message: 'compilation failed: error at @1:1-1:5: undefined identifier fromm' }) });
    const bad = await storeFailure(s.readReadings(sel, FROM, TO));
    expect([bad.code, bad.canRetry(), bad.series]).toEqual(['QUERY_REJECTED', false, 'brennick-yard']);
    expect(bad.message).toContain('compilation failed');

    respond = () => ({ status: 200, body: '#datatype,string,string\r\n#group,true,true\r\n#default,,\r\n,error,reference\r\n,"runtime error @3:6-3:40: filter: type conflict",897\r\n\r\n' });
    const runtime = await storeFailure(s.readReadings(sel, FROM, TO));
    expect([runtime.code, runtime.canRetry()]).toEqual(['QUERY_REJECTED', false]);
    expect(runtime.message).toContain('type conflict');

    respond = () => ({ status: 404, body: JSON.stringify({ code: 'not found', message: 'failed to initialize execute state: could not find bucket "heat"' }) });
    expect((await storeFailure(s.readReadings(sel, FROM, TO))).code).toBe('STORE_DATABASE_MISSING');

    respond = () => ({ status: 401, body: JSON.stringify({ code: 'unauthorized', message: 'unauthorized access' }) });
    const auth = await storeFailure(s.readReadings(sel, FROM, TO));
    expect([auth.code, auth.canRetry()]).toEqual(['STORE_AUTH', false]);
    expect(auth.message).not.toContain('flux-test-token');

    respond = () => ({ status: 503, body: JSON.stringify({ code: 'unavailable', message: 'service unavailable' }) });
    const busy = await storeFailure(s.readReadings(sel, FROM, TO));
    expect([busy.code, busy.canRetry()]).toEqual(['STORE_BUSY', true]);

    respond = () => ({ status: 200, body: '', delayMs: 1_000 });
    const slow = await storeFailure(s.readReadings(sel, FROM, TO));
    expect([slow.code, slow.canRetry()]).toEqual(['STORE_UNREACHABLE', true]);
    expect(slow.message).toMatch(/did not answer within 300 ms/);

    const gone = createInfluxStore({ api: 'v2', url: 'http://127.0.0.1:1', org: 'o', bucket: 'b', token: 't' });
    open.push(gone);
    const down = await storeFailure(gone.readReadings(sel, FROM, TO));
    expect([down.code, down.canRetry()]).toEqual(['STORE_UNREACHABLE', true]);
    expect(s.stats().readFailures).toBe(6);
  });

  it('hostile selectors reach the server as the same query with escaped literals, and give no error beyond "no such series"', async () => {
    const hostile = fc.string({ unit: fc.constantFrom('"', '\\', '\n', '\r', '\t', '$', '{', '}', ')', '|', '>', '/', ' ', 'a', 'é'), minLength: 1, maxLength: 16 });
    let problem: string | null = null;
    respond = (r) => {
      try {
        const got = splitFlux(r.query);
        const ref = splitFlux(buildFluxQuery('heat', resolveSelector({ name: 'p', measurement: 'M', field: 'F', tags: { K: 'V' } }, 'v2'), FROM, TO).toString());
        if (got.skeleton !== ref.skeleton) problem = `structure changed:\n${r.query}`;
      } catch (e) {
        problem = `query does not scan: ${String(e)}\n${r.query}`;
      }
      return { status: 200, body: '\r\n' };
    };
    const s = store();
    await fc.assert(
      fc.asyncProperty(hostile, hostile, hostile, hostile, async (measurement, field, k, v) => {
        fc.pre(!['_measurement', '_field', '_value', '_time', '_start', '_stop', 'result', 'table'].includes(k));
        received.length = 0;
        problem = null;
        const got = await s.readReadings({ name: 'probe', measurement, field, tags: { [k]: v } }, FROM, TO);
        expect(problem).toBeNull();
        expect(got).toEqual([]);
        expect(splitFlux(received[0]!.query).literals.slice(1, 5)).toEqual([measurement, field, k, v]);
      }),
      { numRuns: 60 },
    );
  });
});
