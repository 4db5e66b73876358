/**
 * Bad config files: random text, every truncation of the shipped demo config, wrong types and
 * out-of-range values at random key paths, huge numbers and negative windows. Loading never
 * throws; a bad file gives issues, each with a code, a message, a hint and — where a key is at
 * fault — the key path of that key. A running daemon fed a string of such files on reload keeps
 * its old config and keeps forecasting.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { parse, stringify } from 'yaml';
import { parseConfigObject, parseConfigText, type LoadResult } from '../../src/config/load.ts';
import type { ConfigIssue } from '../../src/config/errors.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { heatLoad, HOUR, loadOrThrow, startClockedDaemon, writeConfig } from '../helpers/fault-daemon.ts';
import { FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';

const DEMO_TEXT = readFileSync(resolve(import.meta.dirname, '../../config/demo.yaml'), 'utf8');
const DEMO = parse(DEMO_TEXT) as Record<string, unknown>;
const CODES = new Set(['CONFIG_READ', 'CONFIG_YAML', 'CONFIG_UNKNOWN_KEY', 'CONFIG_TYPE', 'CONFIG_VALUE', 'CONFIG_COMBINATION', 'SECRET_MISSING']);

const trap = trapUnhandled();
afterAll(() => trap.dispose());

/** Loads without throwing (the assertion), and checks the shape of every issue. */
function load(fn: () => LoadResult): LoadResult {
  let r!: LoadResult;
  expect(() => (r = fn())).not.toThrow();
  if (!r.ok) {
    expect(r.issues.length).toBeGreaterThan(0);
    for (const i of r.issues) checkIssue(i);
  }
  return r;
}

function checkIssue(i: ConfigIssue): void {
  expect(CODES.has(i.code), `code ${i.code}`).toBe(true);
  expect(typeof i.path).toBe('string');
  expect(i.message.length).toBeGreaterThan(0);
  expect(typeof i.hint).toBe('string');
  // A path of keys and indexes (an unknown key is named as written, so any text may appear).
  if (i.code !== 'CONFIG_UNKNOWN_KEY' && i.path !== '') expect(i.path).toMatch(/^[A-Za-z_]\w*(\.\w+|\[\d+\])*$/);
  if (i.code === 'CONFIG_YAML') expect(i.line).toBeGreaterThan(0);
}

/** Every leaf path of a plain object / array tree. */
function leafPaths(v: unknown, prefix: Array<string | number> = []): Array<Array<string | number>> {
  if (Array.isArray(v)) return v.length ? v.flatMap((x, i) => leafPaths(x, [...prefix, i])) : [prefix];
  if (v && typeof v === 'object') {
    const e = Object.entries(v);
    return e.length ? e.flatMap(([k, x]) => leafPaths(x, [...prefix, k])) : [prefix];
  }
  return [prefix];
}

function setAt(root: unknown, path: Array<string | number>, value: unknown): unknown {
  const copy = structuredClone(root) as Record<string | number, unknown>;
  let cur = copy as Record<string | number, unknown>;
  for (let k = 0; k < path.length - 1; k++) cur = cur[path[k]] as Record<string | number, unknown>;
  cur[path.at(-1)!] = value;
  return copy;
}

const fmt = (p: Array<string | number>) => p.reduce<string>((s, x) => (typeof x === 'number' ? `${s}[${x}]` : s ? `${s}.${x}` : String(x)), '');
const related = (a: string, b: string) => a === b || a.startsWith(b + '.') || a.startsWith(b + '[') || b.startsWith(a + '.') || b.startsWith(a + '[');

describe('config loading never crashes', () => {
  it('an alias without its anchor is a CONFIG_YAML issue (found by the property below: it used to throw)', () => {
    const r = load(() => parseConfigText('series:\n  - name: *nowhere\n', { baseDir: tmpdir() }));
    expect(r.ok).toBe(false);
    if (!r.ok) expect(r.issues).toMatchObject([{ code: 'CONFIG_YAML', path: '', line: 2 }]);
  });

  it('random text (property)', () => {
    fc.assert(
      fc.property(fc.oneof(fc.string({ maxLength: 400 }), fc.string({ unit: 'binary', maxLength: 200 }), fc.lorem({ maxCount: 30 })), (text) => {
        const r = load(() => parseConfigText(text, { baseDir: tmpdir() }));
        // A config needs at least one series; random text has none.
        expect(r.ok).toBe(false);
      }),
      { numRuns: 300, seed: 7 },
    );
  });

  it('random YAML-looking text built from config keys, indentation and punctuation (property)', () => {
    const token = fc.constantFrom('series:', 'defaults:', '  - name: a', '  window: ', '  lags: [', ']', '{', '}', '"', "'", ': ', '- ', '  ', '\n', '&a', '*a', '!!binary', '<<: *a', '? ', '|', '>', '#', '1w', '-5', '1e309', 'null', '~', 'true', 'horizon: 24', '\t');
    fc.assert(
      fc.property(fc.array(token, { maxLength: 60 }), (parts) => {
        load(() => parseConfigText(parts.join(''), { baseDir: tmpdir() }));
      }),
      { numRuns: 400, seed: 11 },
    );
  });

  it('every truncation of the demo config: a valid config or issues, never a crash', () => {
    const cuts = new Set<number>();
    for (let i = 0; i <= DEMO_TEXT.length; i += 13) cuts.add(i);
    DEMO_TEXT.split('\n').reduce((pos, line) => (cuts.add(pos), pos + line.length + 1), 0);
    let valid = 0;
    for (const n of cuts) {
      const r = load(() => parseConfigText(DEMO_TEXT.slice(0, n), { baseDir: tmpdir() }));
      if (r.ok) valid++;
    }
    // Some cuts end between whole series entries and are valid configs; most are not.
    expect(valid).toBeGreaterThan(0);
    expect(valid).toBeLessThan(cuts.size);
  });

  it('a wrong type or value at any key path is reported at that path (property)', () => {
    const paths = leafPaths(DEMO);
    const bad = fc.oneof(
      fc.constantFrom<unknown>(null, true, 'nonsense', '', -1, 0, 1e308, -1e308, 2 ** 53 + 1, Number.MAX_SAFE_INTEGER, 1.5, [], {}, [null], { x: 1 }, '-1w', '1e999', '99999999999w'),
      fc.string({ maxLength: 20 }),
      fc.double(),
      fc.integer(),
    );
    fc.assert(
      fc.property(fc.constantFrom(...paths), bad, (path, value) => {
        const mutated = setAt(DEMO, path, value);
        const r = load(() => parseConfigObject(mutated, { baseDir: tmpdir() }));
        if (r.ok) return; // the value happened to be acceptable there
        const at = fmt(path);
        const hit = r.issues.some((i) => related(i.path, at) || i.code === 'CONFIG_COMBINATION');
        expect(hit, `mutating ${at} to ${JSON.stringify(value)} gave ${JSON.stringify(r.issues.map((i) => [i.code, i.path]))}`).toBe(true);
      }),
      { numRuns: 250, seed: 3 },
    );
  });

  const cases: Array<[string, Record<string, unknown>, string, string]> = [
    ['negative window (number)', { window: -5 }, 'CONFIG_VALUE', 'series[0].window'],
    ['negative window (duration)', { window: '-1w' }, 'CONFIG_VALUE', 'series[0].window'],
    ['window of 1e308 steps', { window: 1e308 }, 'CONFIG_VALUE', 'series[0].window'],
    ['horizon beyond 2^53', { horizon: 2 ** 53 + 2 }, 'CONFIG_VALUE', 'series[0].horizon'],
    ['zero horizon', { horizon: 0 }, 'CONFIG_VALUE', 'series[0].horizon'],
    ['negative horizon', { horizon: -24 }, 'CONFIG_VALUE', 'series[0].horizon'],
    ['a million centres', { centres: 1e6 }, 'CONFIG_VALUE', 'series[0].centres'],
    // Would hold 168 million steps per refit (measured before the limit: an INTERNAL "Invalid typed
    // array length" after 1.4 GB; 100000w took 80 s per cycle).
    ['a window of a million weeks', { window: '1000000w' }, 'CONFIG_VALUE', 'series[0].window'],
    ['a window of 1e7 steps', { window: 1e7 }, 'CONFIG_VALUE', 'series[0].window'],
    ['lags of 1e12 steps', { lags: [1e12] }, 'CONFIG_COMBINATION', ''],
    ['quantile above one', { quantiles: [0.1, 1.5] }, 'CONFIG_VALUE', 'series[0].quantiles[1]'],
    ['ridge as a string', { ridge: 'lots' }, 'CONFIG_TYPE', 'series[0].ridge'],
    ['NaN-ish step', { step: 'NaN' }, 'CONFIG_VALUE', 'series[0].step'],
    ['unknown time zone', { timeZone: 'Mars/Olympus' }, 'CONFIG_VALUE', 'series[0].timeZone'],
    ['fit seed below zero', { fit: { seed: -1 } }, 'CONFIG_VALUE', 'series[0].fit.seed'],
  ];
  for (const [name, over, code, path] of cases) {
    it(`hand-picked: ${name} → ${code}${path ? ` at ${path}` : ''}`, () => {
      const r = load(() => parseConfigObject({ series: [{ name: 'oskaveld-north', ...over }] }, { baseDir: tmpdir() }));
      expect(r.ok).toBe(false);
      if (r.ok) return;
      const mine = r.issues.filter((i) => i.code === code);
      expect(mine.length, JSON.stringify(r.issues)).toBeGreaterThan(0);
      if (path) expect(mine.map((i) => i.path)).toContain(path);
      else expect(mine.every((i) => i.path.startsWith('series[0]'))).toBe(true);
    });
  }

  it('huge numbers outside series: port, concurrency, buffer bound', () => {
    const r = load(() =>
      parseConfigObject(
        { http: { port: 1e6 }, daemon: { concurrency: 1e9 }, store: { kind: 'influxdb', influxdb: { api: 'v1', database: 'x', writeBufferPoints: 1e300, batchSize: -1 } }, series: [{ name: 'a' }] },
        { baseDir: tmpdir() },
      ),
    );
    expect(r.ok).toBe(false);
    if (!r.ok) expect(r.issues.map((i) => i.path).sort()).toEqual(['daemon.concurrency', 'http.port', 'store.influxdb.batchSize', 'store.influxdb.writeBufferPoints']);
  });

  it('YAML bombs (alias expansion) are refused, not expanded', () => {
    const bomb = ['a: &a ["x","x","x","x","x","x","x","x","x"]', ...Array.from({ length: 8 }, (_, i) => `${String.fromCharCode(98 + i)}: &${String.fromCharCode(98 + i)} [*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)},*${String.fromCharCode(97 + i)}]`), 'series: [{name: a}]'].join('\n');
    const r = load(() => parseConfigText(bomb, { baseDir: tmpdir() }));
    // Expanded, the document would be valid YAML (9^9 strings, minutes and gigabytes); it is refused
    // as a YAML problem instead, so the aliases were never expanded.
    expect(r.ok).toBe(false);
    if (!r.ok) {
      expect(r.issues.map((i) => i.code)).toEqual(['CONFIG_YAML']);
      expect(r.issues[0].message).toMatch(/alias/i);
    }
  });
});

describe('a running daemon keeps its config when reloads are bad', () => {
  let dir: string;
  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), 'radcast-badcfg-'));
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('twenty bad files in a row are each rejected; the old series keep forecasting; a good file is then applied', async () => {
    const NOW = Date.UTC(2026, 1, 10, 0, 4);
    const END = Math.floor(NOW / HOUR) * HOUR;
    const store = new EmbeddedStore({ path: join(dir, 'store.db') });
    store.writeReadings('oskaveld-north', heatLoad(END - 400 * HOUR, END + 48 * HOUR, 1));
    store.writeReadings('tarrow-hill', heatLoad(END - 400 * HOUR, END + 48 * HOUR, 2));
    await store.close();
    const good = (series: string[]) => ({
      store: { kind: 'embedded', embedded: { path: join(dir, 'store.db') } },
      state: { path: join(dir, 'state.db') },
      http: { port: 0 },
      daemon: { concurrency: 1, watchConfig: false },
      defaults: { ...FAST_SERIES, refit: '5 * * * *' },
      series: series.map((name) => ({ name })),
    });
    const file = writeConfig(dir, good(['oskaveld-north']));
    const cap = captureLogger('info');
    const d = await startClockedDaemon({ loaded: loadOrThrow(file), logger: cap.logger, startMs: NOW });
    try {
      const before = JSON.stringify(d.daemon.config.series);
      const texts = fc.sample(
        fc.oneof(
          fc.string({ maxLength: 200 }),
          fc.constantFrom('series:\n  - name: [unclosed\n', stringify(good(['x'])).slice(0, 120), ''),
          fc.record({ w: fc.constantFrom(-1, 1e308, 'soon', null) }).map(({ w }) => stringify({ ...good(['oskaveld-north', 'tarrow-hill']), defaults: { ...FAST_SERIES, window: w } })),
          fc.constantFrom(1e6, -3, 'many').map((c) => stringify({ ...good(['tarrow-hill']), daemon: { concurrency: c } })),
        ),
        { numRuns: 20, seed: 5 },
      );
      for (const [k, text] of texts.entries()) {
        writeFileSync(file, text);
        const out = await d.daemon.reload('sighup');
        expect(out.applied, `file ${k}: ${JSON.stringify(text).slice(0, 80)}`).toBe(false);
        expect(out.issues.length).toBeGreaterThan(0);
        for (const i of out.issues) checkIssue(i);
        expect(JSON.stringify(d.daemon.config.series)).toBe(before);
        // The old config keeps running: the next tick forecasts the old series.
        if (k % 7 === 0) {
          const n = d.daemon.statuses()[0].lastSuccessAt;
          await d.hour();
          expect(d.daemon.statuses().map((s) => s.series)).toEqual(['oskaveld-north']);
          expect(d.daemon.statuses()[0].lastSuccessAt).not.toBe(n);
          expect(d.daemon.statuses()[0].lastError).toBeNull();
        }
      }
      const ready = JSON.parse((await d.get('/readyz')).text);
      expect(ready.ready).toBe(true);
      expect(ready.checks.config.detail).toMatch(/last reload rejected/);
      writeConfig(dir, good(['oskaveld-north', 'tarrow-hill']));
      expect(await d.daemon.reload('sighup')).toMatchObject({ applied: true, added: ['tarrow-hill'] });
      await d.daemon.flush();
      expect(d.daemon.statuses().map((s) => [s.series, s.lastError])).toEqual([
        ['oskaveld-north', null],
        ['tarrow-hill', null],
      ]);
      expect(cap.lines.filter((l) => l.level >= 50 && !String(l.msg).startsWith('config reload rejected'))).toEqual([]);
    } finally {
      await d.daemon.stop();
    }
    expect(trap.errors).toEqual([]);
  });
});
