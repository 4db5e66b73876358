import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { runCli } from '../../../src/cli/main.ts';
import { EmbeddedStore } from '../../../src/store/embedded.ts';
import { renderConfigReference } from '../../../src/config/doc.ts';

let dir: string;
beforeEach(() => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-cli-'));
});
afterEach(() => rmSync(dir, { recursive: true, force: true }));

async function cli(args: string[], env: Record<string, string | undefined> = {}) {
  let out = '';
  let err = '';
  const code = await runCli(args, { out: (t) => (out += t), err: (t) => (err += t) }, env, dir);
  return { code, out, err };
}

const write = (name: string, text: string) => {
  writeFileSync(join(dir, name), text);
  return name;
};

const CONFIG = `
store: { kind: embedded, embedded: { path: data/radcast.db } }
state: { path: data/state.db }
defaults: { timeZone: Europe/Berlin, window: 4w, calendar: { holidays: { country: DE } } }
series:
  - name: oskaveld-north
    exogenous: [{ name: oskaveld-outdoor-temp, lags: ["1-3"] }]
  - name: oskaveld-outdoor-temp
    lags: ["1-24"]
    centres: 16
`;

describe('radcast check', () => {
  it('prints each series with its resolved settings and exits 0', async () => {
    write('radcast.yaml', CONFIG);
    const r = await cli(['check', '--config', 'radcast.yaml']);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    expect(r.out).toContain(`config ${join(dir, 'radcast.yaml')}: valid, 2 series`);
    expect(r.out).toContain(`store embedded ${join(dir, 'data/radcast.db')}`);
    const north = r.out.slice(r.out.indexOf('series oskaveld-north'), r.out.indexOf('series oskaveld-outdoor-temp'));
    expect(north).toMatch(/horizon\s+24 steps \(1d\)/);
    expect(north).toMatch(/window\s+672 steps \(4w\) -> 481 training samples \(longest lag 168\)/);
    expect(north).toMatch(/lags\s+1-24, 168/);
    expect(north).toMatch(/holidays DE/);
    expect(north).toMatch(/exogenous\s+oskaveld-outdoor-temp \[lags 1-3\]/);
    expect(north).toMatch(/refit\s+"5 \* \* \* \*" \(Europe\/Berlin\)/);
    expect(r.out).toMatch(/series oskaveld-outdoor-temp[\s\S]*centres 16/);
  });

  it('--json gives the resolved settings as data', async () => {
    write('radcast.yaml', CONFIG);
    const r = await cli(['check', '--config', 'radcast.yaml', '--json']);
    const j = JSON.parse(r.out) as { series: { name: string; settings: { windowSteps: number } }[] };
    expect(j.series.map((s) => s.name)).toEqual(['oskaveld-north', 'oskaveld-outdoor-temp']);
    expect(j.series[0].settings.windowSteps).toBe(672);
  });

  it('an invalid config lists every issue on stderr and exits 2', async () => {
    write('bad.yaml', 'series:\n  - { name: a, window: 10 }\n  - { name: b, colour: red }\n');
    const r = await cli(['check', '--config', 'bad.yaml']);
    expect(r.code).toBe(2);
    expect(r.out).toBe('');
    expect(r.err).toContain('2 issue(s)');
    expect(r.err).toContain('CONFIG_COMBINATION series[0].window series=a');
    expect(r.err).toContain('CONFIG_UNKNOWN_KEY series[1].colour series=b');
  });

  it('secrets named in the config must be readable unless --no-secrets', async () => {
    write('influx.yaml', 'store: { kind: influxdb, influxdb: { api: v2, org: o, bucket: b, tokenEnv: RADCAST_T } }\nseries: [{ name: a }]\n');
    expect((await cli(['check', '--config', 'influx.yaml'])).err).toContain('SECRET_MISSING store.influxdb.tokenEnv');
    expect((await cli(['check', '--config', 'influx.yaml'], { RADCAST_T: 'tok-abcdef' })).code).toBe(0);
    const r = await cli(['check', '--config', 'influx.yaml', '--json'], { RADCAST_T: 'tok-abcdef' });
    expect(r.out).not.toContain('tok-abcdef');
    expect((await cli(['check', '--no-secrets', '--config', 'influx.yaml'])).code).toBe(0);
  });

  it('the shipped example configs are valid', async () => {
    const repo = new URL('../../../config/', import.meta.url).pathname;
    expect((await cli(['check', '--config', join(repo, 'demo.yaml')])).code).toBe(0);
    expect((await cli(['check', '--no-secrets', '--config', join(repo, 'influxdb.yaml')])).code).toBe(0);
  });
});

describe('radcast import', () => {
  const good = 'timestamp,value\n2025-01-06T00:00:00+01:00,400.5\n2025-01-06T01:00:00+01:00,390\n2025-01-06T02:00:00+01:00,385.25\n';

  it('writes every row in one go and reports the range', async () => {
    write('radcast.yaml', CONFIG);
    write('north.csv', good);
    const r = await cli(['import', 'north.csv', '--series', 'oskaveld-north', '--config', 'radcast.yaml']);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    expect(r.out).toContain('imported 3 readings into oskaveld-north (2025-01-05T23:00:00.000Z .. 2025-01-06T01:00:00.000Z)');
    const store = new EmbeddedStore({ path: join(dir, 'data/radcast.db') });
    expect(await store.readReadings({ name: 'oskaveld-north' }, 0, Date.UTC(2030, 0))).toEqual([
      { t: Date.UTC(2025, 0, 5, 23), v: 400.5 },
      { t: Date.UTC(2025, 0, 6, 0), v: 390 },
      { t: Date.UTC(2025, 0, 6, 1), v: 385.25 },
    ]);
    await store.close();
  });

  it('a bad line anywhere means nothing is imported, and the line is named', async () => {
    write('north.csv', good);
    expect((await cli(['import', 'north.csv', '--series', 'n', '--db', 'x.db'])).code).toBe(0);
    write('bad.csv', good.replace('390', '39O') + '2025-01-06T03:00:00,380\n');
    const r = await cli(['import', 'bad.csv', '--series', 'n', '--db', 'x.db', '--replace']);
    expect(r.code).toBe(2);
    expect(r.err).toContain('2 bad line(s); nothing was imported');
    expect(r.err).toContain('CSV_VALUE line 3: value "39O" is not a finite number');
    expect(r.err).toContain('CSV_TIME line 5');
    const store = new EmbeddedStore({ path: join(dir, 'x.db') });
    // The earlier import is untouched: --replace did not run.
    expect((await store.readReadings({ name: 'n' }, 0, Date.UTC(2030, 0))).map((x) => x.v)).toEqual([400.5, 390, 385.25]);
    await store.close();
  });

  it('a refusal by the store (empty series name) writes nothing and exits 1 with the code', async () => {
    write('north.csv', good);
    const r = await cli(['import', 'north.csv', '--series', '', '--db', 'y.db']);
    expect(r.code).toBe(1);
    expect(r.err).toContain('SERIES_NAME_INVALID');
    const store = new EmbeddedStore({ path: join(dir, 'y.db') });
    expect(store.listSeries()).toEqual([]);
    await store.close();
  });

  it('--replace swaps the series readings in one transaction', async () => {
    write('north.csv', good);
    await cli(['import', 'north.csv', '--series', 'n', '--db', 'x.db']);
    write('new.csv', 'timestamp,value\n1736118000,1\n');
    const r = await cli(['import', 'new.csv', '--series', 'n', '--db', 'x.db', '--replace']);
    expect(r.out).toContain('3 earlier readings replaced');
    expect(r.out).toContain('the series now holds 1 readings');
  });

  it('needs an embedded store and a readable file', async () => {
    write('north.csv', good);
    expect((await cli(['import', 'north.csv', '--series', 'n'])).err).toContain('needs --config FILE or --db FILE');
    write('influx.yaml', 'store: { kind: influxdb, influxdb: { api: v1, database: heat } }\nseries: [{ name: n }]\n');
    expect((await cli(['import', 'north.csv', '--series', 'n', '--config', 'influx.yaml'])).err).toContain('STORE_KIND');
    expect((await cli(['import', 'missing.csv', '--series', 'n', '--db', 'x.db'])).err).toContain('CSV_READ');
    expect((await cli(['import', 'north.csv', '--db', 'x.db'])).code).toBe(2); // --series is required
  });
});

describe('radcast export', () => {
  it('writes the latest forecast, or the history for one lead, as CSV', async () => {
    const store = new EmbeddedStore({ path: join(dir, 'x.db') });
    const H = 3_600_000;
    for (const issuedAt of [0, H]) {
      await store.writeForecast({ series: 'tarrow-hill', issuedAt, stepMs: H, points: [1, 2].map((lead) => ({ t: issuedAt + lead * H, lead, value: 100 + issuedAt / H + lead / 10, bands: { '0.1': 90, '0.9': 110 } })) });
    }
    await store.close();
    const latest = await cli(['export', '--series', 'tarrow-hill', '--db', 'x.db']);
    expect(latest.code).toBe(0);
    expect(latest.out).toBe(
      'series,issued_at,lead,target_time,value,q10,q90\n' +
        'tarrow-hill,1970-01-01T01:00:00.000Z,1,1970-01-01T02:00:00.000Z,101.1,90,110\n' +
        'tarrow-hill,1970-01-01T01:00:00.000Z,2,1970-01-01T03:00:00.000Z,101.2,90,110\n',
    );
    const lead2 = await cli(['export', '--series', 'tarrow-hill', '--db', 'x.db', '--history', '--lead', '2', '--time-format', 'ms']);
    expect(lead2.out.trim().split('\n').slice(1)).toEqual(['tarrow-hill,0,2,7200000,100.2,90,110', 'tarrow-hill,3600000,2,10800000,101.2,90,110']);
    const ranged = await cli(['export', '--series', 'tarrow-hill', '--db', 'x.db', '--history', '--from', '1970-01-01T01:30:00Z', '--out', 'f.csv']);
    expect(ranged.err).toContain('wrote 3 forecast rows'); // targets 02:00 (two issues) and 03:00
    expect(readFileSync(join(dir, 'f.csv'), 'utf8').trim().split('\n')).toHaveLength(4);
  });

  it('an unknown series exits 1 with a hint; misuse exits 2', async () => {
    new EmbeddedStore({ path: join(dir, 'x.db') }).close();
    const r = await cli(['export', '--series', 'nope', '--db', 'x.db']);
    expect(r.code).toBe(1);
    expect(r.err).toContain('NO_FORECAST');
    expect((await cli(['export', '--series', 'nope', '--db', 'x.db', '--lead', '3'])).code).toBe(2);
  });
});

describe('radcast docs and the program', () => {
  it('docs prints the generated reference and checks a file', async () => {
    expect((await cli(['docs'])).out).toBe(renderConfigReference());
    write('ref.md', 'old');
    expect((await cli(['docs', '--check', 'ref.md'])).code).toBe(1);
    await cli(['docs', '--out', 'ref.md']);
    expect((await cli(['docs', '--check', 'ref.md'])).code).toBe(0);
  });

  it('unknown commands and options exit 2; --help exits 0', async () => {
    expect((await cli(['frobnicate'])).code).toBe(2);
    expect((await cli(['check', '--bogus'])).code).toBe(2);
    const h = await cli(['--help']);
    expect(h.code).toBe(0);
    expect(h.out).toContain('check');
    expect(h.out).toContain('import');
  });
});
