/**
 * `radcast run` (a child process, real binary) is killed with SIGKILL while its first cycles write
 * forecasts into the embedded store, twice in a row, each time at a different point. After
 * each kill both SQLite files (store and state) pass PRAGMA integrity_check and open cleanly; every
 * forecast in them is whole (H steps of one issue, or nothing). Then the next daemon start repairs
 * what the kills left out: every series gets its forecast, and the store and the state ledger agree.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { spawn } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import Database from 'better-sqlite3';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { StateStore } from '../../src/store/state.ts';
import { Daemon } from '../../src/daemon/daemon.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { heatLoad, HOUR, loadOrThrow, writeConfig } from '../helpers/fault-daemon.ts';
import { batchProblems, FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';

const BIN = resolve(import.meta.dirname, '../../bin/radcast.mjs');
const SERIES = Array.from({ length: 12 }, (_, i) => `oskaveld-sub-${String(i + 1).padStart(2, '0')}`);
const HZ = FAST_SERIES.horizon;
let dir: string;
let file: string;
const trap = trapUnhandled();

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-crash-'));
  const now = Math.floor(Date.now() / HOUR) * HOUR;
  const store = new EmbeddedStore({ path: join(dir, 'store.db') });
  SERIES.forEach((s, i) => store.writeReadings(s, heatLoad(now - 400 * HOUR, now + 2 * HOUR, i + 1)));
  await store.close();
  file = writeConfig(dir, {
    store: { kind: 'embedded', embedded: { path: 'store.db' } },
    state: { path: 'state.db' },
    http: { port: 0 },
    log: { level: 'info' },
    daemon: { concurrency: 1, watchConfig: false },
    defaults: { ...FAST_SERIES, refit: '5 * * * *' },
    series: SERIES.map((name) => ({ name })),
  });
});
afterAll(() => {
  trap.dispose();
  rmSync(dir, { recursive: true, force: true });
});

/** Series with a latest forecast in the store file, read by a separate connection (WAL lets it read while the daemon writes). */
function forecastSeries(): Set<string> {
  const db = new Database(join(dir, 'store.db'), { readonly: true, fileMustExist: true });
  try {
    return new Set((db.prepare('SELECT DISTINCT series FROM forecast_latest').all() as { series: string }[]).map((r) => r.series));
  } catch {
    return new Set(); // schema not created yet
  } finally {
    db.close();
  }
}

/** Starts `radcast run`, SIGKILLs it once at least `killAt` series have a forecast. */
async function runAndKill(killAt: number): Promise<{ before: number; signal: string | null; stderr: string }> {
  const child = spawn(process.execPath, [BIN, 'run', '--config', file, '--workers', '0', '--port', '0'], { cwd: dir, stdio: ['ignore', 'pipe', 'pipe'] });
  let stderr = '';
  child.stderr.on('data', (d) => (stderr += String(d)));
  child.stdout.resume();
  const exited = new Promise<string | null>((r) => child.once('exit', (_c, sig) => r(sig)));
  let before = 0;
  const deadline = Date.now() + 30_000;
  for (;;) {
    const n = (() => {
      try {
        return forecastSeries().size;
      } catch {
        return 0;
      }
    })();
    if (n >= killAt || Date.now() > deadline) {
      before = n;
      child.kill('SIGKILL');
      break;
    }
    await new Promise((r) => setTimeout(r, 5));
  }
  return { before, signal: await exited, stderr };
}

function integrity(path: string): string {
  const db = new Database(path, { fileMustExist: true });
  try {
    // A sound file answers the single row "ok" (SQLite documentation of PRAGMA integrity_check).
    return db.pragma('integrity_check', { simple: true }) as string;
  } finally {
    db.close();
  }
}

async function checkFiles(): Promise<{ withForecast: string[] }> {
  expect(integrity(join(dir, 'store.db'))).toBe('ok');
  expect(integrity(join(dir, 'state.db'))).toBe('ok');
  const store = new EmbeddedStore({ path: join(dir, 'store.db') });
  const state = new StateStore({ path: join(dir, 'state.db') });
  try {
    const withForecast: string[] = [];
    for (const s of SERIES) {
      const latest = await store.readLatestForecast(s);
      if (latest) {
        withForecast.push(s);
        expect(batchProblems(latest, HZ), s).toEqual([]);
        expect(new Set(latest.points.map(() => latest.issuedAt)).size).toBe(1);
      }
    }
    const perIssue = store.db.prepare('SELECT series, issued_at, count(*) AS n FROM forecast_history GROUP BY series, issued_at').all() as { n: number }[];
    expect(perIssue.every((r) => r.n === HZ)).toBe(true);
    // The state file opens and answers.
    for (const s of SERIES) state.latestIssued(s);
    return { withForecast };
  } finally {
    await store.close();
    state.close();
  }
}

describe('SIGKILL during writes to the embedded store', () => {
  const kills: Array<{ before: number; after: number }> = [];

  for (const [round, killAt] of [2, 7].entries()) {
    it(`round ${round + 1}: killed once ${killAt} series have a forecast; both files pass integrity_check and hold only whole forecasts`, async () => {
      const r = await runAndKill(killAt);
      expect(r.signal, r.stderr).toBe('SIGKILL');
      const { withForecast } = await checkFiles();
      kills.push({ before: r.before, after: withForecast.length });
      expect(withForecast.length).toBeGreaterThanOrEqual(r.before);
    }, 60_000);
  }

  it('precondition: the kills left series without a forecast', () => {
    expect(kills.at(-1)!.after).toBeLessThan(SERIES.length);
  });

  it('the next start repairs what was missing: every series is forecast, store and ledger agree', async () => {
    const cap = captureLogger('info');
    const daemon = new Daemon({ loaded: loadOrThrow(file), logger: cap.logger, workers: 0, httpPort: 0, watchConfig: false, initialRun: true });
    await daemon.start();
    await daemon.flush();
    await daemon.stop();
    expect(cap.lines.filter((l) => l.level >= 50)).toEqual([]);
    const { withForecast } = await checkFiles();
    expect(withForecast).toEqual(SERIES);
    const store = new EmbeddedStore({ path: join(dir, 'store.db') });
    const state = new StateStore({ path: join(dir, 'state.db') });
    try {
      for (const s of SERIES) {
        const inStore = (await store.readLatestForecast(s))!;
        const inLedger = state.latestIssued(s)!;
        expect(inLedger, s).not.toBeNull();
        expect(inLedger.issuedAt).toBe(inStore.issuedAt);
        expect(inLedger.points.map((p) => p.value)).toEqual(inStore.points.map((p) => p.value));
        expect(state.cycle(s)?.lastSuccessAt, s).toBeGreaterThan(0);
      }
    } finally {
      await store.close();
      state.close();
    }
    expect(trap.errors).toEqual([]);
  }, 60_000);
});
