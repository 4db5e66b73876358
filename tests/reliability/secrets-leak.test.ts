/**
 * Secrets never leave the process. Known canary values are handed to radcast as an InfluxDB
 * password (from a file), as an InfluxDB token (from an environment variable) and as a webhook URL
 * (from an environment variable). Then every output channel is captured and searched for each
 * canary, raw and in the encodings a request carries it in (Basic credentials in base64, URL
 * encoding):
 *   - stdout and stderr of child processes `radcast once` (text and --json), `radcast run` and
 *     `radcast backtest --report`,
 *   - every HTTP body of the running daemon: /, /api/series, /api/series/NAME, /metrics,
 *     /readyz, /healthz and the assets,
 *   - the backtest HTML report.
 * The stores are made to fail in the ways most likely to drag a credential into a message: a
 * real influxd refusing a wrong password, and a misconfigured gateway that echoes the request
 * headers (with the Authorization header) in its error answer.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { startFaultProxy, type FaultProxy } from '../helpers/fault-proxy.ts';
import { heatLines, heatLoad, HOUR, until, writeConfig } from '../helpers/fault-daemon.ts';
import { FAST_SERIES } from '../helpers/fault-cycle.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';

const BIN = resolve(import.meta.dirname, '../../bin/radcast.mjs');
const CANARY_PASSWORD = 'rc-canary-pw-Zt8Hn3Bq6Ys1';
const CANARY_TOKEN = 'rc-canary-tok-7Q9xKp2Lm4Vw';
const CANARY_HOOK = 'rc-canary-hook-Jd5Rf0Uc2Xe9';
const USER = 'radcast';
const SERIES = 'oskaveld-north';

/** Every form in which a canary could show up in text. */
function forms(): Array<[string, string]> {
  const out: Array<[string, string]> = [];
  for (const c of [CANARY_PASSWORD, CANARY_TOKEN, CANARY_HOOK]) {
    out.push([c, c], [c, encodeURIComponent(c)], [c, Buffer.from(c).toString('base64')], [c, c.slice(3, 17)]);
  }
  out.push([CANARY_PASSWORD, Buffer.from(`${USER}:${CANARY_PASSWORD}`).toString('base64')]);
  return out;
}
function expectClean(channel: string, text: string): void {
  expect(text.length, `${channel} captured something`).toBeGreaterThan(0);
  for (const [canary, form] of forms()) expect(text.includes(form), `${channel} contains the secret ${canary} (as "${form}")`).toBe(false);
}

let dir: string;
let influx: Influx1Server;
let gateway: FaultProxy;
const env = {
  ...process.env,
  RADCAST_CANARY_TOKEN: CANARY_TOKEN,
  RADCAST_CANARY_HOOK: `http://127.0.0.1:9/hook?token=${CANARY_HOOK}`,
};

function run(args: string[], opts: { stopWhen?: (out: string) => boolean; timeoutMs?: number } = {}) {
  const child = spawn(process.execPath, [BIN, ...args], { cwd: dir, env, stdio: ['ignore', 'pipe', 'pipe'] });
  let out = '';
  let err = '';
  child.stdout.on('data', (d) => (out += String(d)));
  child.stderr.on('data', (d) => (err += String(d)));
  const done = new Promise<{ code: number | null; out: string; err: string }>((r) => child.once('close', (code) => r({ code, out, err })));
  return { child, done, out: () => out, err: () => err };
}

const seriesDoc = (over: Record<string, unknown> = {}) => ({
  ...FAST_SERIES,
  refit: '5 * * * *',
  source: { measurement: 'heat', field: 'load_kw', tags: { substation: SERIES } },
  drift: { webhook: { urlEnv: 'RADCAST_CANARY_HOOK' } },
  ...over,
});

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-secrets-'));
  influx = await startInflux1({ admin: { username: USER, password: 'the-real-password-0' } });
  gateway = await startFaultProxy(influx.url);
  gateway.mode = 'reflect';
  writeFileSync(join(dir, 'influx-password'), CANARY_PASSWORD + '\n');
  const now = Math.floor(Date.now() / HOUR) * HOUR;
  const emb = new EmbeddedStore({ path: join(dir, 'demo.db') });
  emb.writeReadings(SERIES, heatLoad(now - 60 * 24 * HOUR, now, 1));
  await emb.close();
  // Wrong password for a real influxd (read from a file).
  writeConfig(dir, { store: { kind: 'influxdb', influxdb: { url: influx.url, api: 'v1', database: 'oskaveld', user: USER, passwordFile: 'influx-password', timeout: '15s', flushInterval: '100ms', maxRetryDelay: '1s' } }, state: { path: 'a-state.db' }, http: { port: 0 }, daemon: { watchConfig: false }, defaults: seriesDoc(), series: [{ name: SERIES }] }, 'password-file.yaml');
  // A token from the environment, sent to a gateway that echoes request headers in its errors.
  writeConfig(dir, { store: { kind: 'influxdb', influxdb: { url: gateway.url, api: 'v1', database: 'oskaveld', tokenEnv: 'RADCAST_CANARY_TOKEN', timeout: '2s', flushInterval: '100ms', maxRetryDelay: '1s' } }, state: { path: 'b-state.db' }, http: { port: 0 }, daemon: { watchConfig: false, shutdownTimeout: '5s' }, defaults: seriesDoc(), series: [{ name: SERIES }] }, 'token-env.yaml');
  // Embedded store with data (for the backtest report), same secrets in the environment.
  writeConfig(dir, { store: { kind: 'embedded', embedded: { path: 'demo.db' } }, state: { path: 'c-state.db' }, http: { port: 0 }, daemon: { watchConfig: false }, defaults: seriesDoc({ backtest: { every: '1d', span: '1w' } }), series: [{ name: SERIES }] }, 'embedded.yaml');
  // The real influxd with the right user, for readings that exist (so failures are about auth only).
  await influx.query('CREATE DATABASE oskaveld');
  await influx.writeLines('oskaveld', heatLines(SERIES, heatLoad(now - 400 * HOUR, now, 1)));
}, 60_000);

afterAll(async () => {
  await gateway?.close();
  await influx?.close();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('secrets never appear in any output', () => {
  it('radcast once (text and --json) against a server refusing the password and a gateway echoing the token, and radcast backtest --report: stdout, stderr and the report are clean', async () => {
    // Started together: the machine has two cores and each child spends most of its time starting.
    const runs = await Promise.all([
      run(['once', '--config', 'password-file.yaml', '--workers', '0', '--log-level', 'debug']).done,
      run(['once', '--config', 'token-env.yaml', '--workers', '0', '--log-level', 'debug']).done,
      run(['once', '--config', 'token-env.yaml', '--workers', '0', '--json']).done,
      run(['backtest', '--config', 'token-env.yaml', '--workers', '0', '--json']).done,
      run(['backtest', '--config', 'embedded.yaml', '--workers', '0', '--report', 'report.html']).done,
    ]);
    for (const [k, r] of runs.slice(0, 4).entries()) {
      expect(r.code, `run ${k}: ${r.err}`).toBe(1); // the series failed (as it should)
      expectClean(`run #${k} stdout`, r.out + ' ');
      expectClean(`run #${k} stderr`, r.err + ' ');
    }
    // The failures are the ones provoked (so the canaries were really in play).
    expect(runs[0].out, runs[0].out).toMatch(/STORE_AUTH/);
    expect(runs[2].out).toContain('STORE_BUSY');
    // The gateway did see the token: it was sent, just never shown.
    expect(gateway.requests.length).toBeGreaterThan(0);
    // The backtest that could read its data wrote a report; the secrets were loaded all the same.
    const report = runs[4];
    expect(report.code, report.err).toBe(0);
    const html = readFileSync(join(dir, 'report.html'), 'utf8');
    expect(html).toContain(SERIES);
    expectClean('backtest report', html);
    expectClean('backtest stdout', report.out + ' ');
    expectClean('backtest stderr', report.err + ' ');
  }, 120_000);

  it('radcast run: every HTTP body and both output streams are clean while the store fails', async () => {
    const p = run(['run', '--config', 'token-env.yaml', '--workers', '0', '--port', '0', '--log-level', 'debug']);
    try {
      const portOf = () => {
        for (const l of p.out().split('\n')) {
          try {
            const j = JSON.parse(l) as { msg?: string; port?: number };
            if (j.msg === 'http listening' && j.port) return j.port;
          } catch {
            /* not JSON */
          }
        }
        return 0;
      };
      expect(await until(() => portOf() > 0, 30_000), p.err()).toBe(true);
      const base = `http://127.0.0.1:${portOf()}`;
      // Wait for the first (failing) cycle.
      expect(await until(async () => ((await (await fetch(`${base}/api/series`)).json()) as { series: Array<{ lastError: unknown }> }).series[0]?.lastError != null, 30_000)).toBe(true);
      const paths = ['/', '/index.html', '/api/series', `/api/series/${SERIES}`, '/api/series/nope', '/metrics', '/readyz', '/healthz', '/assets/page.js', '/assets/page.css', '/nothing-here'];
      for (const path of paths) {
        const res = await fetch(base + path);
        const body = await res.text();
        const headers = JSON.stringify([...res.headers]);
        expectClean(`GET ${path}`, body + headers);
      }
      const page = await (await fetch(`${base}/`)).text();
      expect(page).toContain('STORE_BUSY');
    } finally {
      p.child.kill('SIGTERM');
    }
    const r = await p.done;
    expect(r.code).toBe(0);
    expectClean('run stdout', r.out);
    expectClean('run stderr', r.err + ' ');
  }, 90_000);
});
