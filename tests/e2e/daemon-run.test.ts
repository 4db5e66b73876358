/**
 * `radcast run` as a real process on a temp copy of the demo config: it serves /healthz and
 * /readyz on loopback, rejects an invalid config on SIGHUP while it keeps running, and exits 0
 * after SIGTERM with the shutdown logged.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { spawn, type ChildProcessWithoutNullStreams } from 'node:child_process';
import { readFileSync, writeFileSync } from 'node:fs';
import path from 'node:path';
import { mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import { stringify } from 'yaml';
import { ROOT, demoFixture, logLines, type DemoFixture } from './demo-fixture.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { HOUR, syntheticLoad } from '../unit/daemon/fakes.ts';

let fx: DemoFixture;
beforeAll(() => {
  fx = demoFixture({ series: ['oskaveld-outdoor-temp'] });
});
afterAll(() => fx?.cleanup());

function waitFor(get: () => string, re: RegExp, timeoutMs: number): Promise<RegExpMatchArray> {
  return new Promise((resolve, reject) => {
    const t0 = Date.now();
    const tick = () => {
      const m = get().match(re);
      if (m) return resolve(m);
      if (Date.now() - t0 > timeoutMs) return reject(new Error(`timed out waiting for ${re}; output so far:\n${get().slice(-2000)}`));
      setTimeout(tick, 50);
    };
    tick();
  });
}

describe('radcast run (process)', () => {
  it('serves health on loopback, keeps running on an invalid reload, exits 0 on SIGTERM', async () => {
    const child: ChildProcessWithoutNullStreams = spawn(
      process.execPath,
      [path.join(ROOT, 'bin/radcast.mjs'), 'run', '--config', fx.config, '--port', '0', '--no-initial-run', '--workers', '0'],
      { cwd: ROOT, env: { ...process.env }, stdio: ['pipe', 'pipe', 'pipe'] },
    );
    let out = '';
    let err = '';
    child.stdout.on('data', (d) => (out += d));
    child.stderr.on('data', (d) => (err += d));
    const exited = new Promise<{ code: number | null; signal: string | null }>((resolve) => child.on('close', (code, signal) => resolve({ code, signal })));
    try {
      const m = await waitFor(() => out, /"port":(\d+)[^\n]*"msg":"http listening"/, 60_000);
      const base = `http://127.0.0.1:${m[1]}`;
      expect(out).toMatch(/"host":"127\.0\.0\.1"/);
      expect((await fetch(`${base}/healthz`)).status).toBe(200);
      const ready = await fetch(`${base}/readyz`);
      expect(ready.status).toBe(200);
      await waitFor(() => out, /"msg":"radcast daemon started"/, 10_000);

      // An invalid config: rejected, logged with its key path, the daemon keeps serving.
      const good = readFileSync(fx.config, 'utf8');
      writeFileSync(fx.config, good.replace('window: 8w', 'window: 8w\n  colour: blue'));
      child.kill('SIGHUP');
      await waitFor(() => out, /"msg":"config reload rejected; the running config stays in effect"/, 20_000);
      const rejected = logLines(out).filter((l) => typeof l.msg === 'string' && (l.msg as string).startsWith('config reload rejected:'));
      expect(rejected.some((l) => l.code === 'CONFIG_UNKNOWN_KEY' && String(l.path).includes('colour'))).toBe(true);
      expect((await fetch(`${base}/healthz`)).status).toBe(200);
      expect((await fetch(`${base}/readyz`)).status).toBe(200);

      child.kill('SIGTERM');
      const { code, signal } = await exited;
      expect(signal).toBeNull();
      expect(code).toBe(0);
      const lines = logLines(out);
      expect(lines.some((l) => l.msg === 'stop signal received' && l.signal === 'SIGTERM')).toBe(true);
      expect(lines.at(-1)).toMatchObject({ msg: 'radcast daemon stopped', abandoned: 0 });
      expect(err).toBe('');
    } finally {
      if (child.exitCode === null) child.kill('SIGKILL');
    }
  });
});

describe('radcast run: SIGTERM during a running cycle', () => {
  it('lets the running cycle finish and write, then exits 0', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-run-'));
    try {
      // Fresh readings up to the current hour, so the first cycle really fits (invented test data).
      const now = Date.now();
      const end = Math.floor(now / HOUR) * HOUR;
      const store = new EmbeddedStore({ path: path.join(dir, 'store.db') });
      store.writeReadings('oskaveld-north', syntheticLoad({ fromMs: end - 40 * 24 * HOUR, toMs: end }));
      store.close();
      const config = path.join(dir, 'radcast.yaml');
      writeFileSync(
        config,
        stringify({
          store: { kind: 'embedded', embedded: { path: 'store.db' } },
          state: { path: 'state.db' },
          daemon: { concurrency: 1, shutdownTimeout: '60s', watchConfig: false },
          defaults: { window: '3w', centres: 8, lags: ['1-24', 168], drift: { staleAfter: '6h' } },
          series: [{ name: 'oskaveld-north' }],
        }),
      );
      const child = spawn(process.execPath, [path.join(ROOT, 'bin/radcast.mjs'), 'run', '--config', config, '--port', '0', '--workers', '1'], { cwd: ROOT, stdio: ['ignore', 'pipe', 'pipe'] });
      let out = '';
      child.stdout.on('data', (d) => (out += d));
      child.stderr.on('data', (d) => (out += d));
      const exited = new Promise<number | null>((resolve) => child.on('close', (code) => resolve(code)));
      try {
        await waitFor(() => out, /"msg":"radcast daemon started"/, 60_000);
        child.kill('SIGTERM'); // the first cycle (a cold fit on a worker) is running now
        expect(await exited).toBe(0);
        const lines = logLines(out);
        const stopping = lines.find((l) => typeof l.msg === 'string' && (l.msg as string).startsWith('shutting down'));
        expect(stopping?.running).toEqual(['oskaveld-north']);
        expect(lines.at(-1)).toMatchObject({ msg: 'radcast daemon stopped', finished: 1, abandoned: 0 });
        const check = new EmbeddedStore({ path: path.join(dir, 'store.db') });
        const latest = await check.readLatestForecast('oskaveld-north');
        check.close();
        expect(latest?.issuedAt).toBe(end - HOUR);
        expect(latest?.points).toHaveLength(24);
      } finally {
        if (child.exitCode === null) child.kill('SIGKILL');
      }
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
