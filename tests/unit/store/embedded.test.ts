import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import Database from 'better-sqlite3';
import { EmbeddedStore } from '../../../src/store/embedded.ts';
import type { ForecastBatch } from '../../../src/store/types.ts';

const H = 3_600_000;
let dir: string;
let store: EmbeddedStore;

beforeEach(() => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-embedded-'));
  store = new EmbeddedStore({ path: join(dir, 'radcast.db') });
});
afterEach(async () => {
  await store.close();
  rmSync(dir, { recursive: true, force: true });
});

function batch(series: string, issuedAt: number, base: number, horizon = 24): ForecastBatch {
  return {
    series,
    issuedAt,
    stepMs: H,
    points: Array.from({ length: horizon }, (_, l) => ({ t: issuedAt + (l + 1) * H, lead: l + 1, value: base + l, bands: { '0.1': base + l - 5, '0.5': base + l, '0.9': base + l + 5 } })),
  };
}

describe('embedded store', () => {
  it('opens the file in WAL mode with synchronous=NORMAL', () => {
    // PRAGMA journal_mode answers "wal" and synchronous answers 1 (NORMAL) per the SQLite pragma documentation.
    expect(store.db.pragma('journal_mode', { simple: true })).toBe('wal');
    expect(store.db.pragma('synchronous', { simple: true })).toBe(1);
    expect(existsSync(join(dir, 'radcast.db-wal'))).toBe(true);
  });

  it('readings round-trip by range, half-open [from, to), NaN kept as NaN, rewrites overwrite', async () => {
    store.writeReadings('oskaveld-north', [{ t: 0, v: 1 }, { t: H, v: 2 }, { t: 2 * H, v: NaN }, { t: 3 * H, v: 4 }]);
    store.writeReadings('brennick-yard', [{ t: H, v: 99 }]);
    const r = await store.readReadings({ name: 'oskaveld-north' }, H, 3 * H);
    expect(r).toHaveLength(2);
    expect(r[0]).toEqual({ t: H, v: 2 });
    expect(r[1].t).toBe(2 * H);
    expect(r[1].v).toBeNaN();
    store.writeReadings('oskaveld-north', [{ t: H, v: 20 }]);
    expect((await store.readReadings({ name: 'oskaveld-north' }, 0, 10 * H)).map((x) => x.v)).toEqual([1, 20, NaN, 4]);
    expect(store.readingsExtent('oskaveld-north')).toEqual({ count: 4, firstMs: 0, lastMs: 3 * H });
    expect(store.listSeries()).toEqual(['brennick-yard', 'oskaveld-north']);
  });

  it('the latest forecast is replaced per run; the history keeps every lead and target time', async () => {
    await store.writeForecast(batch('a', 0, 100));
    await store.writeForecast(batch('a', H, 200, 12)); // shorter second run: latest must not keep old leads 13..24
    const latest = await store.readLatestForecast('a');
    expect(latest?.issuedAt).toBe(H);
    expect(latest?.points).toHaveLength(12);
    expect(latest?.points[0]).toEqual({ t: 2 * H, lead: 1, value: 200, bands: { '0.1': 195, '0.5': 200, '0.9': 205 } });
    const all = await store.readForecastHistory('a');
    expect(all).toHaveLength(24 + 12);
    // "what we said 1 step ahead": one point per issue
    const lead1 = await store.readForecastHistory('a', { lead: 1 });
    expect(lead1.map((p) => [p.t, p.value, p.issuedAt])).toEqual([[H, 100, 0], [2 * H, 200, H]]);
    const row = store.db.prepare("SELECT lo, hi, json_extract(bands, '$.\"0.5\"') AS mid FROM forecast_history WHERE series='a' AND lead=1 AND t=?").get(H) as { lo: number; hi: number; mid: number };
    expect(row).toEqual({ lo: 95, hi: 105, mid: 100 });
  });

  it('writing the same forecast, scores and health again is idempotent', async () => {
    const b = batch('a', 0, 100);
    await store.writeForecast(b);
    await store.writeForecast(b);
    const score = { series: 'a', t: 5 * H, lead: 0, mae: 1.5, rmse: 2, mase: 0.8, bias: -0.1, coverage: 0.79, n: 48, season: 24 };
    await store.writeScores([score, { ...score, lead: 1 }]);
    await store.writeScores([{ ...score, mae: 1.25 }]);
    const hp = { series: 'a', t: 5 * H, state: 'watch' as const, statistic: 3.5, recentMase: 1.1, baselineMase: 0.8, noveltyShare: 0.05, lastReadingAt: 4 * H };
    await store.writeHealth([hp]);
    await store.writeHealth([hp]);
    const count = (table: string) => (store.db.prepare(`SELECT count(*) AS n FROM ${table}`).get() as { n: number }).n;
    expect(count('forecast_history')).toBe(24);
    expect(count('forecast_latest')).toBe(24);
    expect(count('scores')).toBe(2);
    expect(count('health')).toBe(1);
    expect((await store.readScores('a')).find((s) => s.lead === 0)?.mae).toBe(1.25);
    const [h] = await store.readHealth('a');
    expect(h).toEqual(hp);
    expect((store.db.prepare('SELECT state_code FROM health').get() as { state_code: number }).state_code).toBe(1);
  });

  it('NaN scores survive as NaN (SQLite stores them as NULL)', async () => {
    await store.writeScores([{ series: 'a', t: 0, lead: 0, mae: 1, rmse: 1, mase: NaN, bias: 0, coverage: NaN, n: 3, season: 24 }]);
    const [s] = await store.readScores('a');
    expect(s.mase).toBeNaN();
    expect(s.coverage).toBeNaN();
  });

  it('a batch with a non-finite point is refused whole: nothing of it is written', async () => {
    await store.writeForecast(batch('a', 0, 100));
    const bad = batch('a', H, 200);
    bad.points[7].value = NaN;
    await expect(store.writeForecasts([batch('b', H, 1), bad])).rejects.toMatchObject({ code: 'POINT_INVALID', series: 'a' });
    expect((await store.readLatestForecast('a'))?.issuedAt).toBe(0);
    expect(await store.readLatestForecast('b')).toBeNull();
  });

  it('a failure inside a transaction rolls back everything written in it', () => {
    expect(() =>
      store.transaction(() => {
        store.writeReadings('a', [{ t: 0, v: 1 }]);
        throw new Error('boom');
      }),
    ).toThrow('boom');
    expect(store.readingsExtent('a')).toBeNull();
  });

  it('reopening the file sees everything; a closed store refuses with STORE_CLOSED', async () => {
    await store.writeForecast(batch('a', 0, 100));
    await store.close();
    const again = new EmbeddedStore({ path: join(dir, 'radcast.db') });
    expect((await again.readLatestForecast('a'))?.points).toHaveLength(24);
    expect(await again.ping()).toBe(true);
    await again.close();
    expect(await again.ping()).toBe(false);
    await expect(again.readReadings({ name: 'a' }, 0, 1)).rejects.toMatchObject({ code: 'STORE_CLOSED' });
    store = new EmbeddedStore({ path: join(dir, 'radcast.db') });
  });

  it('a process killed (SIGKILL) mid-write leaves a consistent file: whole batches or none', async () => {
    const file = join(dir, 'crash.db');
    const script = fileURLToPath(new URL('./crash-writer.ts', import.meta.url));
    const child = spawn(process.execPath, ['--import', 'tsx', script, file], { stdio: ['ignore', 'pipe', 'pipe'] });
    let commits = 0;
    let stderr = '';
    child.stderr.on('data', (d) => (stderr += String(d)));
    await new Promise<void>((resolve, reject) => {
      child.stdout.on('data', (d: Buffer) => {
        commits += String(d).split('\n').filter((l) => l.startsWith('committed')).length;
        if (commits >= 30) {
          child.kill('SIGKILL');
          resolve();
        }
      });
      child.on('exit', (code, sig) => (sig === 'SIGKILL' ? resolve() : reject(new Error(`writer exited ${code}: ${stderr}`))));
    });
    await new Promise((r) => child.once('close', r));
    // The SQLite integrity check answers the single row "ok" for a sound file (SQLite pragma documentation).
    const raw = new Database(file);
    expect(raw.pragma('integrity_check', { simple: true })).toBe('ok');
    raw.close();
    const s = new EmbeddedStore({ path: file });
    for (const series of ['north', 'yard', 'hill']) {
      const latest = await s.readLatestForecast(series);
      expect(latest?.points).toHaveLength(24);
      expect(new Set(latest!.points.map((p) => Math.floor(p.value / 1000))).size).toBe(1);
    }
    const perIssue = s.db.prepare('SELECT issued_at, count(*) AS n FROM forecast_history GROUP BY series, issued_at').all() as { n: number }[];
    expect(perIssue.length).toBeGreaterThanOrEqual(30 * 3);
    expect(perIssue.every((r) => r.n === 24)).toBe(true);
    const readings = s.readingsExtent('north')!;
    expect(readings.count % 50).toBe(0);
    await s.close();
  });
});
