/**
 * The daemon's HTTP side from an attacker's seat, against the real Daemon:
 *   - it binds to 127.0.0.1 unless configured (another loopback address gets no answer), and to
 *     exactly the configured address when one is set;
 *   - it is read-only: every method other than GET/HEAD on every path is refused with 405 and
 *     changes nothing (no cycle starts, no counter moves, the store files stay as they were);
 *     path tricks do not reach files outside the assets;
 *   - text from the config and from the store (series names with markup, an error message with
 *     markup, a filter in the query string) reaches the page escaped: the only script elements
 *     are the two shipped assets, no event-handler attribute appears, and JSON carries no raw "<".
 * And radcast runs without root: `radcast once` as an unprivileged user (uid 10001, the
 * container's user) writes its forecast with only its own state directory writable.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import http from 'node:http';
import { spawnSync } from 'node:child_process';
import { chownSync, mkdtempSync, readFileSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { StoreError } from '../../src/store/influx/errors.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { heatLoad, hookStore, HOUR, loadOrThrow, metricValue, startClockedDaemon, writeConfig, type ClockedDaemon } from '../helpers/fault-daemon.ts';
import { FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';

const NOW = Date.UTC(2026, 3, 14, 0, 4);
const END = Math.floor(NOW / HOUR) * HOUR;
// Series names may hold anything but spaces and control characters (config schema).
const HOSTILE = ['"><svg/onload=alert(1)>', '<script>alert(2)</script>', "x'onmouseover='alert(3)'", '</textarea><img/src=x/onerror=alert(4)>'];
const PLAIN = 'oskaveld-north';
const FAILING = 'brennick-yard';
const trap = trapUnhandled();

function request(port: number, method: string, path: string, host = '127.0.0.1', body?: string): Promise<{ status: number; headers: http.IncomingHttpHeaders; text: string }> {
  return new Promise((resolvePromise, reject) => {
    const req = http.request({ host, port, method, path, headers: body ? { 'content-type': 'application/json', 'content-length': Buffer.byteLength(body) } : {} }, (res) => {
      let text = '';
      res.on('data', (d) => (text += String(d)));
      res.on('end', () => resolvePromise({ status: res.statusCode ?? 0, headers: res.headers, text }));
    });
    req.on('error', reject);
    req.end(body);
  });
}

let dir: string;
let d: ClockedDaemon;
let port: number;
const cap = captureLogger('info');

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-http-'));
  const store = new EmbeddedStore({ path: join(dir, 'store.db') });
  [PLAIN, FAILING, ...HOSTILE].forEach((s, i) => store.writeReadings(s, heatLoad(END - 400 * HOUR, END, i + 1)));
  const file = writeConfig(dir, {
    store: { kind: 'embedded', embedded: { path: join(dir, 'store.db') } },
    state: { path: join(dir, 'state.db') },
    http: { port: 0 }, // no address: the default must be loopback
    daemon: { concurrency: 1, watchConfig: false },
    defaults: { ...FAST_SERIES, refit: '5 * * * *' },
    series: [PLAIN, FAILING, ...HOSTILE].map((name) => ({ name })),
  });
  const hooked = hookStore(store);
  hooked.beforeRead = (sel) => {
    if (sel.name === FAILING) throw new StoreError('QUERY_REJECTED', 'server said: <img src=x onerror=alert(5)> near "<b>"', { series: FAILING, hint: '<a href="javascript:alert(6)">fix</a>' });
  };
  d = await startClockedDaemon({ loaded: loadOrThrow(file), logger: cap.logger, startMs: NOW, store: hooked });
  port = d.daemon.httpAddress!.port;
  await d.hour();
});
afterAll(async () => {
  await d?.daemon.stop();
  trap.dispose();
  rmSync(dir, { recursive: true, force: true });
});

describe('binding', () => {
  it('binds to 127.0.0.1 by default: 127.0.0.2 (also loopback) gets no answer on the same port', async () => {
    expect(d.daemon.httpAddress!.host).toBe('127.0.0.1');
    expect((await request(port, 'GET', '/healthz')).status).toBe(200);
    await expect(request(port, 'GET', '/healthz', '127.0.0.2')).rejects.toMatchObject({ code: 'ECONNREFUSED' });
  });

  it('binds to exactly the configured address', async () => {
    const file = writeConfig(
      dir,
      {
        store: { kind: 'embedded', embedded: { path: join(dir, 'other.db') } },
        state: { path: join(dir, 'other-state.db') },
        http: { address: '127.0.0.2', port: 0 },
        daemon: { watchConfig: false },
        defaults: FAST_SERIES,
        series: [{ name: PLAIN }],
      },
      'other.yaml',
    );
    const other = await startClockedDaemon({ loaded: loadOrThrow(file), logger: captureLogger('warn').logger, startMs: NOW });
    try {
      const p = other.daemon.httpAddress!.port;
      expect(other.daemon.httpAddress!.host).toBe('127.0.0.2');
      expect((await request(p, 'GET', '/healthz', '127.0.0.2')).status).toBe(200);
      await expect(request(p, 'GET', '/healthz', '127.0.0.1')).rejects.toMatchObject({ code: 'ECONNREFUSED' });
    } finally {
      await other.daemon.stop();
    }
  });
});

describe('read-only endpoints', () => {
  const paths = ['/', '/index.html', '/healthz', '/readyz', '/metrics', '/api/series', `/api/series/${PLAIN}`, '/assets/page.js', '/assets/chart.umd.min.js', '/favicon.ico', '/nothing'];
  const methods = ['POST', 'PUT', 'DELETE', 'PATCH', 'OPTIONS', 'TRACE', 'PROPFIND'];

  it('every other method on every path is 405 with Allow: GET, HEAD, and changes nothing', async () => {
    const before = { metrics: (await request(port, 'GET', '/metrics')).text, store: statSync(join(dir, 'store.db')).mtimeMs, state: statSync(join(dir, 'state.db')).mtimeMs };
    const attempts = Number(metricValue(before.metrics, 'radcast_cycles_total{outcome="ok"}'));
    for (const path of paths) {
      for (const method of methods) {
        const r = await request(port, method, path, '127.0.0.1', JSON.stringify({ series: PLAIN, run: true, refit: '* * * * *' }));
        expect(r.status, `${method} ${path}`).toBe(405);
        expect(r.headers.allow).toBe('GET, HEAD');
        expect(r.text).not.toContain('refit');
      }
    }
    expect(d.daemon.scheduler.inFlight).toEqual([]);
    const after = (await request(port, 'GET', '/metrics')).text;
    expect(metricValue(after, 'radcast_cycles_total{outcome="ok"}')).toBe(attempts);
    expect(metricValue(after, 'radcast_config_reloads_total{outcome="applied"}')).toBe(0);
    expect(statSync(join(dir, 'store.db')).mtimeMs).toBe(before.store);
    expect(statSync(join(dir, 'state.db')).mtimeMs).toBe(before.state);
  });

  it('HEAD answers like GET without a body', async () => {
    const r = await request(port, 'HEAD', '/');
    expect(r.status).toBe(200);
    expect(r.text).toBe('');
  });

  it('path tricks do not reach files outside the assets', async () => {
    for (const p of ['/assets/../package.json', '/assets/%2e%2e/%2e%2e/package.json', '/assets/..%2f..%2fpackage.json', '//etc/passwd', '/assets/page.js/../../src/daemon/http.ts', '/api/series/..%2F..%2Fetc%2Fpasswd', '/api/series/%E0%A4%A']) {
      const r = await request(port, 'GET', p);
      expect([400, 404], p).toContain(r.status);
      expect(r.text).not.toMatch(/"dependencies"|root:x:0|import http/);
    }
  });
});

describe('escaping of text from the config and the store', () => {
  it('the page: only the two shipped scripts, no event handlers, every hostile name and the error text shown escaped', async () => {
    const html = (await request(port, 'GET', '/?filter=%22%3E%3Cscript%3Ealert(7)%3C%2Fscript%3E')).text + (await request(port, 'GET', '/')).text;
    const scripts = html.match(/<script\b[^>]*>/gi) ?? [];
    expect(new Set(scripts)).toEqual(new Set(['<script src="/assets/chart.umd.min.js" defer>', '<script src="/assets/page.js" defer>']));
    expect(html).not.toMatch(/<(svg|img|iframe|object|embed|textarea|a)\b[^>]*\bon\w+\s*=/i);
    expect(html).not.toMatch(/\son(load|error|mouseover)\s*=/i);
    expect(html).not.toMatch(/<img\b|<svg\b|<\/textarea>/i);
    expect(html).not.toContain('javascript:');
    // The names are there, escaped, so the operator still sees them.
    for (const name of HOSTILE) expect(html).toContain(name.replace(/[&<>"'`=]/g, (c) => `&#${c.charCodeAt(0)};`));
    expect(html).toContain('QUERY_REJECTED');
    expect(html).toContain('&#60;img src&#61;x onerror&#61;alert(5)&#62;');
  });

  it('JSON answers carry no raw "<" and keep the names exact when parsed', async () => {
    const list = await request(port, 'GET', '/api/series');
    expect(list.text).not.toContain('<');
    const parsed = JSON.parse(list.text) as { series: Array<{ series: string; lastError: { message: string } | null }> };
    expect(parsed.series.map((s) => s.series)).toEqual([PLAIN, FAILING, ...HOSTILE]);
    expect(parsed.series[1].lastError!.message).toContain('<img src=x onerror=alert(5)>');
    for (const name of HOSTILE) {
      const r = await request(port, 'GET', `/api/series/${encodeURIComponent(name)}`);
      expect(r.status).toBe(200);
      expect(r.text).not.toContain('<');
      expect((JSON.parse(r.text) as { series: string }).series).toBe(name);
      expect(r.headers['content-type']).toBe('application/json; charset=utf-8');
    }
    const page = await request(port, 'GET', '/');
    expect(page.headers['content-security-policy']).toMatch(/script-src 'self'/);
    expect(page.headers['x-content-type-options']).toBe('nosniff');
    expect(trap.errors).toEqual([]);
  });
});

// Root can drop to another user; a checkout that user cannot read makes the check meaningless.
const REPO = resolve(import.meta.dirname, '../..');
const canDrop =
  typeof process.getuid === 'function' &&
  process.getuid() === 0 &&
  spawnSync('setpriv', ['--reuid=10001', '--regid=10001', '--clear-groups', process.execPath, '-e', `require('fs').readFileSync(${JSON.stringify(join(REPO, 'src/cli/main.ts'))})`]).status === 0;

describe('without root', () => {
  it.skipIf(!canDrop)('radcast once as uid 10001 (the container user) forecasts with only its state directory writable', async () => {
    const home = mkdtempSync(join(tmpdir(), 'radcast-nonroot-'));
    try {
      const store = new EmbeddedStore({ path: join(home, 'radcast.db') });
      store.writeReadings(PLAIN, heatLoad(END - 400 * HOUR, END, 1));
      await store.close();
      writeConfig(home, { store: { kind: 'embedded', embedded: { path: 'radcast.db' } }, state: { path: 'radcast-state.db' }, defaults: FAST_SERIES, series: [{ name: PLAIN }] });
      for (const f of ['', 'radcast.db', 'radcast.yaml']) chownSync(join(home, f), 10001, 10001);
      const r = spawnSync(
        'setpriv',
        ['--reuid=10001', '--regid=10001', '--clear-groups', process.execPath, join(REPO, 'bin/radcast.mjs'), 'once', '--config', join(home, 'radcast.yaml'), '--workers', '0', '--json', '--at', new Date(NOW).toISOString()],
        { cwd: home, env: { PATH: process.env.PATH, HOME: home, TMPDIR: home }, encoding: 'utf8', timeout: 60_000 },
      );
      expect(r.status, r.stderr).toBe(0);
      expect((JSON.parse(r.stdout) as { ok: number }).ok).toBe(1);
      const check = new EmbeddedStore({ path: join(home, 'radcast.db') });
      expect((await check.readLatestForecast(PLAIN))?.points).toHaveLength(FAST_SERIES.horizon);
      await check.close();
      expect(statSync(join(home, 'radcast-state.db')).uid).toBe(10001);
      // The container and the unit name that user (deploy/ files).
      expect(readFileSync(join(REPO, 'deploy/Containerfile'), 'utf8')).toMatch(/^USER 10001:10001$/m);
      expect(readFileSync(join(REPO, 'deploy/radcast.service'), 'utf8')).toMatch(/^User=radcast$/m);
      expect(readFileSync(join(REPO, 'deploy/radcast.service'), 'utf8')).not.toMatch(/^User=(root|0)$/m);
    } finally {
      rmSync(home, { recursive: true, force: true });
    }
  }, 90_000);
});
