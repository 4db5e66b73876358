/**
 * Query injection end to end, through the whole program: series whose names (and source tag
 * values) are hostile to InfluxQL and line protocol are configured in a YAML file, their readings
 * are in a real influxd, and `radcast once` runs over them. Each hostile series must be read
 * exactly (its own readings, nobody else's), forecast, and written back under its exact name;
 * the database, its measurements and the other series stay as they were. The unit tests of the
 * query builders (tests/unit/store/influx-query.test.ts) and the selector tests against influxd
 * (tests/integration/influx-injection.test.ts) check the builders alone; this one checks that the
 * names survive YAML, config resolution, the cycle and the write path too.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Point } from '@influxdata/influxdb-client';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { heatLoad, HOUR, writeConfig } from '../helpers/fault-daemon.ts';
import { FAST_SERIES } from '../helpers/fault-cycle.ts';
import { parseConfigObject } from '../../src/config/load.ts';
import { runCli } from '../../src/cli/main.ts';

const DB = 'oskaveld';
const NOW = Date.UTC(2026, 0, 20, 6, 5);
const END = Math.floor(NOW / HOUR) * HOUR;
const CANARY = 'oskaveld-north';
const TRAILING = 'north\\';

// InfluxQL and line-protocol metacharacters; series names may not hold whitespace or control characters.
const meta = fc.constantFrom('"', "'", '\\', ';', '-', ',', '=', '(', ')', '*', '/', '$', '{', '}', '|', '>', '#', '.', 'x', 'é', '🔥');
const HAND = [
  `x';DROP_DATABASE_${DB};--`,
  'a"OR"1"="1',
  '\\"\\\\',
  'heat,substation=oskaveld-north',
  "')|>drop(columns:[\"_value\"])//",
  'a=b,c=d',
  '#comment',
];

let influx: Influx1Server;
let dir: string;
let names: string[];

const quoteId = (s: string) => `"${s.replace(/\\/g, '\\\\').replace(/"/g, '\\"')}"`;
const quoteStr = (s: string) => `'${s.replace(/\\/g, '\\\\').replace(/'/g, "\\'")}'`;

async function rows(q: string): Promise<unknown[][]> {
  return (await influx.query(q, DB)).results[0]?.series?.flatMap((s) => s.values) ?? [];
}

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-inject-'));
  const random = fc.sample(fc.string({ unit: meta, minLength: 2, maxLength: 16 }), { numRuns: 40, seed: 99 });
  // Keep names the config accepts (no whitespace or control characters) and that differ.
  names = [...new Set([...HAND, ...random])].filter((n) => parseConfigObject({ series: [{ name: n }] }).ok && !n.endsWith('\\')).slice(0, 12);
  influx = await startInflux1();
  await influx.query(`CREATE DATABASE ${DB}`);
  const lines: string[] = [];
  [CANARY, ...names].forEach((name, i) => {
    for (const r of heatLoad(END - 220 * HOUR, END, i + 1, 200 + 50 * i)) lines.push(new Point('heat').tag('substation', name).floatField('load_kw', r.v).timestamp(new Date(r.t)).toLineProtocol()!);
  });
  // Point times are ns by default: write with precision ns.
  const res = await fetch(`${influx.url}/write?db=${DB}&precision=ns`, { method: 'POST', body: lines.join('\n') });
  expect(res.status).toBe(204);
}, 60_000);

afterAll(async () => {
  await influx?.close();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('hostile series names through radcast once and influxd', () => {
  it('precondition: a dozen names full of quotes, backslashes, commas, equals signs and statement breaks', () => {
    expect(names.length).toBeGreaterThanOrEqual(10);
    expect(names.some((n) => n.includes("'")) && names.some((n) => n.includes('"')) && names.some((n) => n.includes('\\'))).toBe(true);
  });

  it('every series is read exactly, forecast and written under its exact name; nothing else changes', async () => {
    writeConfig(dir, {
      store: { kind: 'influxdb', influxdb: { url: influx.url, api: 'v1', database: DB, timeout: '30s', flushInterval: '100ms' } },
      state: { path: join(dir, 'state.db') },
      daemon: { concurrency: 1, watchConfig: false },
      defaults: { ...FAST_SERIES, source: { measurement: 'heat', field: 'load_kw', aggregate: 'step' } },
      // A trailing backslash cannot be written as a tag value in line protocol: that series must
      // fail alone (SERIES_NAME_INVALID), the others are unaffected.
      series: [...names, TRAILING].map((name) => ({ name, source: { tags: { substation: name } } })),
    });
    let out = '';
    let err = '';
    const code = await runCli(['once', '--config', 'radcast.yaml', '--workers', '0', '--json', '--log-level', 'silent', '--at', new Date(NOW).toISOString()], { out: (s) => void (out += s), err: (s) => void (err += s) }, {}, dir);
    expect(err).toBe('');
    expect(code, out).toBe(1);
    const summary = JSON.parse(out) as { ok: number; results: Array<{ series: string; readings: number; outcome: string; error?: { code: string } }> };
    expect(summary.ok).toBe(names.length);
    const refused = summary.results.find((r) => r.series === TRAILING)!;
    expect(refused.error?.code).toBe('SERIES_NAME_INVALID');
    // Each read found exactly its own series' readings (the hourly count of its window).
    const counts = new Set(summary.results.filter((r) => r.series !== TRAILING).map((r) => r.readings));
    expect(counts.size).toBe(1);

    // The database and the canary series are intact; only radcast's measurements were added.
    const dbs = (await influx.query('SHOW DATABASES')).results[0].series![0].values.map((v) => v[0]);
    expect(dbs).toContain(DB);
    const measurements = (await rows('SHOW MEASUREMENTS')).map((v) => v[0]).sort();
    expect(measurements).toEqual(['heat', 'radcast_forecast', 'radcast_forecast_latest', 'radcast_health'].sort());
    expect((await rows(`SELECT count("load_kw") FROM "heat" WHERE "substation" = ${quoteStr(CANARY)}`))[0][1]).toBe(220);

    // Forecasts are tagged with the exact names, one full horizon each.
    const tagValues = (await rows(`SHOW TAG VALUES FROM "radcast_forecast" WITH KEY = "series"`)).map((v) => v[1]).sort();
    expect(tagValues).toEqual([...names].sort());
    for (const name of names) {
      const got = await rows(`SELECT "value" FROM "radcast_forecast_latest" WHERE "series" = ${quoteStr(name)}`);
      expect(got.length, name).toBe(FAST_SERIES.horizon);
      for (const r of got) expect(Number.isFinite(r[1] as number)).toBe(true);
    }
    // And the health points too (identifier quoting of the measurement is exercised as well).
    expect((await rows(`SELECT count("state_code") FROM ${quoteId('radcast_health')}`))[0][1]).toBe(names.length);
  }, 120_000);
});
