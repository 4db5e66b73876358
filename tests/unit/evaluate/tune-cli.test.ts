/**
 * `radcast tune` through the CLI against an embedded store: the --json document's schema, the
 * printed table and snippet, --write on a commented config file (only the tuned lines change),
 * --report, and usage errors.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import path from 'node:path';
import { z } from 'zod';
import { runCli } from '../../../src/cli/main.ts';
import { parseLagSets, parseWindows } from '../../../src/cli/tune.ts';
import { EmbeddedStore } from '../../../src/store/embedded.ts';
import { knownRbfConfig, knownRbfSeries } from './tune-fixtures.ts';

let dir: string;

async function cli(args: string[]): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await runCli(args, { out: (t) => void (out += t), err: (t) => void (err += t) }, {}, dir);
  return { code, out, err };
}

beforeAll(() => {
  dir = mkdtempSync(path.join(tmpdir(), 'radcast-tune-cli-'));
  const { target, drive } = knownRbfSeries(24 * 8);
  const store = new EmbeddedStore({ path: path.join(dir, 'radcast.db') });
  const rows = (s: typeof target) => Array.from(s.values, (v, i) => ({ t: s.startMs + i * s.stepMs, v }));
  store.writeReadings('synthetic', rows(target));
  store.writeReadings('drive', rows(drive));
  void store.close();
});

afterAll(() => rmSync(dir, { recursive: true, force: true }));

const CONFIG = (tune: string) =>
  knownRbfConfig({
    store: 'store:\n  kind: embedded   # one local file\n  embedded:\n    path: radcast.db\nstate:\n  path: state.db',
    tune,
    backtest: '{ every: 8, span: 48 }    # six origins',
  });

const num = z.number().nullable();
const JsonDoc = z.strictObject({
  version: z.literal(1),
  series: z.string(),
  step: z.string(),
  stepMs: z.number(),
  horizon: z.number().int(),
  season: z.number().int(),
  quantiles: z.array(z.number()),
  spanSteps: z.number().int(),
  requestedSpanSteps: z.number().int(),
  everySteps: z.number().int(),
  origins: z.number().int(),
  originTimes: z.array(z.iso.datetime()),
  scaleWindowSteps: z.number().int(),
  sharedInputs: z.record(z.string(), z.number().int()),
  seed: z.number().int(),
  threads: z.number().int(),
  originWorkers: z.number().int(),
  elapsedMs: z.number(),
  budgetMs: num,
  stoppedByBudget: z.boolean(),
  combinations: z.strictObject({ grid: z.number(), ranked: z.number(), failed: z.number(), notStarted: z.number(), skipped: z.number() }),
  ranking: z.array(
    z.strictObject({
      rank: z.number().int(),
      id: z.number().int(),
      label: z.string(),
      settings: z.object({ window: z.union([z.string(), z.number()]), windowSteps: z.number(), centres: z.number(), widthMode: z.enum(['shared', 'per-centre']) }),
      mase: num,
      rmse: num,
      mae: num,
      bias: num,
      coverage: num,
      nominalCoverage: num,
      fitMsPerRefit: num,
      fitMsMedian: num,
      origins: z.number().int(),
      failedOrigins: z.number().int(),
      gain: z.record(z.string(), num),
      baselines: z.record(z.string(), z.object({ mase: num, rmse: num, m: num })),
      vsBest: z.strictObject({ n: z.number(), meanDiff: num, se: num, withinNoise: z.boolean().nullable() }).nullable(),
      maseByLead: z.array(num),
      maseByOrigin: z.array(z.strictObject({ at: z.iso.datetime(), mase: num })),
    }),
  ),
  noise: z.strictObject({ rule: z.string(), withinNoise: z.array(z.number()), cheapestWithinNoise: z.number().nullable() }),
  failed: z.array(z.unknown()),
  notStarted: z.array(z.unknown()),
  skipped: z.array(z.object({ label: z.string(), code: z.string(), message: z.string() })),
  best: z.strictObject({ id: z.number(), label: z.string(), settings: z.record(z.string(), z.unknown()), changes: z.array(z.object({ key: z.string(), from: z.string() })) }),
  snippet: z.string(),
  written: z.unknown().nullable(),
});

describe('radcast tune (CLI)', () => {
  it('--json prints one document of the documented shape, ranked by MASE', async () => {
    const file = path.join(dir, 'json.yaml');
    writeFileSync(file, CONFIG('{ windows: [120, 200, 3], centres: [2, 4], widthModes: [shared] }'));
    const r = await cli(['tune', '-c', file, '--json', '--threads', '0', '--seed', '3']);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    const doc = JsonDoc.parse(JSON.parse(r.out));
    expect(doc.series).toBe('synthetic');
    expect(doc.combinations).toEqual({ grid: 6, ranked: 4, failed: 0, notStarted: 0, skipped: 2 });
    expect(doc.skipped[0].code).toBe('CONFIG_COMBINATION'); // window 3 leaves one training sample
    expect(doc.origins).toBe(6);
    expect(doc.ranking.map((e) => e.rank)).toEqual([1, 2, 3, 4]);
    const mases = doc.ranking.map((e) => e.mase as number);
    expect([...mases].sort((a, b) => a - b)).toEqual(mases);
    expect(doc.ranking[0].vsBest).toBeNull();
    expect(doc.best.label).toBe(doc.ranking[0].label);
    expect(doc.snippet).toMatch(/^# radcast tune synthetic: best of 4 settings/);
    expect(doc.snippet).toContain(`centres: ${doc.ranking[0].settings.centres}\n`);
    expect(doc.written).toBeNull();
  }, 60_000);

  it('--write changes only the tuned keys of a commented config, after a backup; --report writes the page', async () => {
    const file = path.join(dir, 'write.yaml');
    const text = CONFIG('{ windows: [200], centres: [2, 4, 8], widthModes: [shared] }').replace('    window: 200\n', '    window: 100       # too short on purpose\n').replace('    lags: [1]\n', '    lags: [1]\n    centres: 1        # underfits: tune should raise it\n');
    writeFileSync(file, text);
    const r = await cli(['tune', '-c', file, '--threads', '0', '--write', '--report', 'tune.html', '--top', '2']);
    expect(r.code).toBe(0);
    expect(r.err).toBe('wrote report tune.html\n');
    expect(r.out).toMatch(/^tune synthetic: 3 settings ranked/);
    expect(r.out).toContain('… 1 more');
    expect(r.out).toMatch(/wrote 2 key\(s\) to .*write\.yaml \(backup .*write\.yaml\.bak\)/);
    expect(readFileSync(`${file}.bak`, 'utf8')).toBe(text);
    const after = readFileSync(file, 'utf8').split('\n');
    const before = text.split('\n');
    expect(after).toHaveLength(before.length);
    const changed = before.map((l, i) => [l, after[i]]).filter(([a, b]) => a !== b);
    expect(changed.map(([a]) => a)).toEqual(['    window: 100       # too short on purpose', '    centres: 1        # underfits: tune should raise it']);
    expect(changed[0][1]).toBe('    window: 200       # too short on purpose');
    expect(changed[1][1]).toMatch(/^ {4}centres: (4|8) {8}# underfits: tune should raise it$/);
    expect(readFileSync(path.join(dir, 'tune.html'), 'utf8')).toContain('id="heatmap"');
    // A second run finds nothing to change and makes no new backup.
    const bestK = /centres: (\d+)/.exec(changed[1][1])![1];
    const again = await cli(['tune', '-c', file, '--threads', '0', '--write', '--centres', bestK]);
    expect(again.out).toContain('nothing written');
    expect(readFileSync(`${file}.bak`, 'utf8')).toBe(text);
  }, 60_000);

  it('reports usage errors with exit code 2', async () => {
    const file = path.join(dir, 'json.yaml');
    const bad = await cli(['tune', '-c', file, '--centres', '8,x']);
    expect(bad.code).toBe(2);
    expect(bad.err).toMatch(/^USAGE: --centres: "x"/);
    const unknown = await cli(['tune', '-c', file, '-s', 'nope']);
    expect(unknown.code).toBe(2);
    expect(unknown.err).toMatch(/^UNKNOWN_SERIES/);
    const budget = await cli(['tune', '-c', file, '--budget', 'soon']);
    expect(budget.err).toMatch(/^USAGE: --budget/);
    const none = await cli(['tune', '-c', file, '--windows', '3']);
    expect(none.code).toBe(2);
    expect(none.err).toMatch(/^NO_COMBINATION/);
    expect(existsSync(path.join(dir, 'json.yaml.bak'))).toBe(false);
  });

  it('parses grid lists', () => {
    expect(parseLagSets('1-24,168; 1-48')).toEqual({ ok: true, value: [['1-24', 168], ['1-48']] });
    expect(parseLagSets('1-24,x').ok).toBe(false);
    expect(parseWindows('4w, 8w,672')).toEqual({ ok: true, value: ['4w', '8w', 672] });
  });
});
