/**
 * Sharding with real processes against one embedded store: two `radcast once` processes run at
 * the same time on the same SQLite file, one with `--shard 0/2`, the other as a StatefulSet pod
 * would (RADCAST_SHARD_FROM_HOSTNAME=1, RADCAST_SHARDS=2, host name radcast-1). Each keeps its
 * own local state file, as each pod has its own volume. Afterwards every series has been
 * forecast exactly once: by the shard its name hashes to, and by no other.
 *
 * The readings are invented (a daily-cycle load per substation): this test checks who forecasts
 * what, not accuracy.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { spawn } from 'node:child_process';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import Database from 'better-sqlite3';
import { EmbeddedStore } from '../../src/store/index.ts';
import { shardOf } from '../../src/daemon/shard.ts';

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../..');
const bin = path.join(root, 'bin/radcast.mjs');
const HOUR = 3_600_000;
const H = 6;
const NAMES = Array.from({ length: 12 }, (_, i) => `oskaveld-sub-${String(i).padStart(2, '0')}`);
const START = Date.UTC(2026, 10, 2, 0);
const HOURS = 24 * 21;
/** Cycle time: five minutes after the last reading's hour closed. */
const AT = START + HOURS * HOUR + 5 * 60_000;

let dir = '';
let storePath = '';

function config(statePath: string): string {
  return [
    `store: { kind: embedded, embedded: { path: ${JSON.stringify(storePath)} } }`,
    `state: { path: ${JSON.stringify(statePath)} }`,
    'http: { enabled: false }',
    'log: { level: warn }',
    'daemon: { concurrency: 1 }',
    'defaults:',
    '  step: 1h',
    '  timeZone: Europe/Berlin',
    `  horizon: ${H}`,
    '  window: 1w',
    '  centres: 8',
    '  lags: [1, 2, 3, 24]',
    '  seasonalInputs: false',
    '  fit: { restarts: 1, widthIterations: 1 }',
    'series:',
    ...NAMES.map((n) => `  - name: ${n}`),
    '',
  ].join('\n');
}

interface Proc {
  code: number | null;
  stdout: string;
  stderr: string;
}

function radcast(args: string[], env: Record<string, string>): Promise<Proc> {
  return new Promise((resolve, reject) => {
    const clean = { ...process.env };
    delete clean.RADCAST_SHARD;
    delete clean.RADCAST_SHARDS;
    delete clean.RADCAST_SHARD_FROM_HOSTNAME;
    const child = spawn(process.execPath, [bin, ...args], { env: { ...clean, ...env }, cwd: dir });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d) => (stdout += d));
    child.stderr.on('data', (d) => (stderr += d));
    const timer = setTimeout(() => child.kill('SIGKILL'), 90_000);
    child.on('error', reject);
    child.on('close', (code) => {
      clearTimeout(timer);
      resolve({ code, stdout, stderr });
    });
  });
}

interface OnceJson {
  ok: number;
  failed: number;
  results: { series: string; outcome: string; issuedAt: number | null }[];
}

const modelsIn = (file: string): string[] => {
  const db = new Database(file, { readonly: true });
  try {
    return (db.prepare('SELECT series FROM models ORDER BY series').all() as { series: string }[]).map((r) => r.series);
  } finally {
    db.close();
  }
};

describe('two radcast once processes with two shards on one embedded store', () => {
  let a: Proc;
  let b: Proc;

  beforeAll(async () => {
    dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-shard-'));
    storePath = path.join(dir, 'radcast.db');
    const store = new EmbeddedStore({ path: storePath });
    NAMES.forEach((name, k) => {
      const readings = [];
      for (let i = 0; i < HOURS; i++) {
        const hour = i % 24;
        readings.push({ t: START + i * HOUR, v: 200 + 20 * k + 60 * Math.sin((2 * Math.PI * (hour - 6)) / 24) + 5 * Math.sin(i * 0.7 + k) });
      }
      store.writeReadings(name, readings);
    });
    await store.close();
    writeFileSync(path.join(dir, 'shard0.yaml'), config(path.join(dir, 'state-0.db')));
    writeFileSync(path.join(dir, 'shard1.yaml'), config(path.join(dir, 'state-1.db')));
    const at = new Date(AT).toISOString();
    // Both at once: the store file is shared, so this also exercises concurrent writers.
    [a, b] = await Promise.all([
      radcast(['once', '--config', 'shard0.yaml', '--shard', '0/2', '--at', at, '--json', '--workers', '0'], {}),
      radcast(['once', '--config', 'shard1.yaml', '--at', at, '--json', '--workers', '0'], {
        RADCAST_SHARD_FROM_HOSTNAME: '1',
        RADCAST_SHARDS: '2',
        HOSTNAME: 'radcast-1',
      }),
    ]);
  }, 120_000);

  afterAll(() => {
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it('precondition: both shards own some of the series', () => {
    const owners = NAMES.map((n) => shardOf(n, 2));
    expect(owners).toContain(0);
    expect(owners).toContain(1);
  });

  it('both processes succeed', () => {
    expect(a.code, a.stderr).toBe(0);
    expect(b.code, b.stderr).toBe(0);
  });

  it('each process forecasts exactly the series its shard owns', () => {
    const ja = JSON.parse(a.stdout) as OnceJson;
    const jb = JSON.parse(b.stdout) as OnceJson;
    const sa = ja.results.map((r) => r.series).sort();
    const sb = jb.results.map((r) => r.series).sort();
    expect(sa).toEqual(NAMES.filter((n) => shardOf(n, 2) === 0).sort());
    expect(sb).toEqual(NAMES.filter((n) => shardOf(n, 2) === 1).sort());
    for (const r of [...ja.results, ...jb.results]) expect(r.outcome, r.series).toBe('ok');
  });

  it('together they cover every series once and none twice', () => {
    const sa = (JSON.parse(a.stdout) as OnceJson).results.map((r) => r.series);
    const sb = (JSON.parse(b.stdout) as OnceJson).results.map((r) => r.series);
    expect([...sa, ...sb].sort()).toEqual([...NAMES].sort());
    expect(sa.filter((n) => sb.includes(n))).toEqual([]);
    // Each shard's local state holds models of its own series only.
    const ma = modelsIn(path.join(dir, 'state-0.db'));
    const mb = modelsIn(path.join(dir, 'state-1.db'));
    expect(ma).toEqual([...sa].sort());
    expect(mb).toEqual([...sb].sort());
    expect(ma.filter((n) => mb.includes(n))).toEqual([]);
  });

  it('the shared store holds one forecast of H steps per series, from the expected origin', async () => {
    const store = new EmbeddedStore({ path: storePath });
    try {
      const origin = START + (HOURS - 1) * HOUR;
      for (const name of NAMES) {
        const latest = await store.readLatestForecast(name);
        expect(latest, name).not.toBeNull();
        expect(latest!.issuedAt).toBe(origin);
        expect(latest!.points).toHaveLength(H);
        const history = await store.readForecastHistory(name);
        expect(history).toHaveLength(H);
        for (const p of latest!.points) expect(Number.isFinite(p.value)).toBe(true);
      }
    } finally {
      await store.close();
    }
  });

  it('a shard index outside the count is refused before any work, with a hint', async () => {
    const r = await radcast(['once', '--config', 'shard0.yaml', '--shard', '2/2', '--json'], {});
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/SHARD_INDEX_OUT_OF_RANGE --shard="2\/2".*0-based/);
    expect(r.stdout).toBe('');
  });
});
