/**
 * Real time-series servers for integration tests: InfluxDB 1.x (`influxd`, v1 HTTP API) and
 * VictoriaMetrics (accepts the InfluxDB v2 write path). Each server runs on free loopback ports
 * with its data in a fresh temp folder, is ready when its health endpoint answers, and is stopped
 * by PID. Data survives stop()/kill() + restart() (same port, same folder) so outage tests can
 * check that nothing was lost; close() stops the server and deletes the folder.
 *
 *   const influx = await startInflux1();            // { url, port, stop, kill, restart, close, ... }
 *   await influx.query('CREATE DATABASE radcast');
 *   ...
 *   await influx.close();
 *
 * Server output goes to `<dataDir>/server.log` (printed in the error when a start fails), never
 * to the test's console.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, openSync, closeSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

export interface TestServer {
  /** Base URL, e.g. http://127.0.0.1:41234 (no trailing slash). */
  readonly url: string;
  readonly port: number;
  /** Temp folder holding the server's data and its log. */
  readonly dataDir: string;
  /** PID of the running server process, null while stopped. */
  readonly pid: number | null;
  /** Graceful stop (SIGTERM, SIGKILL after stopTimeoutMs); data is kept for restart(). */
  stop(): Promise<void>;
  /** Hard stop (SIGKILL), like a crash or a power cut; data on disk is kept. */
  kill(): Promise<void>;
  /** Start again (stopping first if running) on the same port and data folder; resolves when ready. */
  restart(): Promise<void>;
  /** Stop and delete the data folder. Safe to call twice. */
  close(): Promise<void>;
}

export interface Influx1Server extends TestServer {
  /** Runs InfluxQL through POST /query (epoch=ms) and returns the parsed JSON; throws on HTTP or statement errors. */
  query(q: string, db?: string): Promise<InfluxQLResponse>;
  /** Writes raw line protocol through POST /write (precision ms). */
  writeLines(db: string, lines: string[], rp?: string): Promise<void>;
}

export interface InfluxQLSeries {
  name: string;
  tags?: Record<string, string>;
  columns: string[];
  values: unknown[][];
}
export interface InfluxQLResponse {
  results: { statement_id: number; series?: InfluxQLSeries[]; error?: string }[];
}

export interface StartOptions {
  /** Give up waiting for readiness after this long (ms). Both servers start in well under a second. */
  readyTimeoutMs?: number;
  /** SIGKILL after this long when SIGTERM does not end the process (ms). */
  stopTimeoutMs?: number;
}

export interface Influx1Options extends StartOptions {
  /** Turn on HTTP authentication and create this admin user (the first user must be an admin). */
  admin?: { username: string; password: string };
}

const live = new Set<ChildProcess>();
let exitHookInstalled = false;
function installExitHook(): void {
  if (exitHookInstalled) return;
  exitHookInstalled = true;
  // A crashed test worker must not leave servers behind.
  process.on('exit', () => {
    for (const child of live) {
      try {
        child.kill('SIGKILL');
      } catch {
        /* already gone */
      }
    }
  });
}

/** A TCP port on 127.0.0.1 that was free a moment ago. */
export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const srv = createServer();
    srv.unref();
    srv.on('error', reject);
    srv.listen(0, '127.0.0.1', () => {
      const addr = srv.address();
      const port = typeof addr === 'object' && addr ? addr.port : 0;
      srv.close(() => resolve(port));
    });
  });
}

const sleep = (ms: number) => new Promise<void>((r) => setTimeout(r, ms));

interface ProcessSpec {
  command: string;
  args: string[];
  dataDir: string;
  /** Resolves true when the server answers its health endpoint. */
  isReady: () => Promise<boolean>;
  readyTimeoutMs: number;
  stopTimeoutMs: number;
}

/** Owns one server process: start, wait until ready, stop by PID. */
class ManagedProcess {
  #spec: ProcessSpec;
  #child: ChildProcess | null = null;
  #exited: Promise<void> | null = null;

  constructor(spec: ProcessSpec) {
    this.#spec = spec;
  }

  get pid(): number | null {
    return this.#child?.pid ?? null;
  }

  get logPath(): string {
    return join(this.#spec.dataDir, 'server.log');
  }

  async start(): Promise<void> {
    if (this.#child) throw new Error(`${this.#spec.command} already running (pid ${this.#child.pid})`);
    const logFd = openSync(this.logPath, 'a');
    let child: ChildProcess;
    try {
      child = spawn(this.#spec.command, this.#spec.args, { stdio: ['ignore', logFd, logFd] });
    } finally {
      closeSync(logFd);
    }
    installExitHook();
    live.add(child);
    this.#child = child;
    let exitInfo: string | null = null;
    this.#exited = new Promise<void>((resolve) => {
      child.once('exit', (code, signal) => {
        exitInfo = `exit code ${code} signal ${signal}`;
        live.delete(child);
        resolve();
      });
      child.once('error', (err) => {
        exitInfo = `spawn error ${err.message}`;
        live.delete(child);
        resolve();
      });
    });
    const deadline = Date.now() + this.#spec.readyTimeoutMs;
    for (;;) {
      if (exitInfo !== null) {
        this.#child = null;
        throw new Error(`${this.#spec.command} ended before it was ready (${exitInfo}); log:\n${this.#tail()}`);
      }
      if (await this.#spec.isReady().catch(() => false)) return;
      if (Date.now() > deadline) {
        await this.kill();
        throw new Error(`${this.#spec.command} not ready after ${this.#spec.readyTimeoutMs} ms; log:\n${this.#tail()}`);
      }
      await sleep(25);
    }
  }

  async #signal(signal: NodeJS.Signals, timeoutMs: number): Promise<void> {
    const child = this.#child;
    const exited = this.#exited;
    if (!child || !exited) return;
    child.kill(signal);
    const timedOut = await Promise.race([exited.then(() => false), sleep(timeoutMs).then(() => true)]);
    if (timedOut) {
      child.kill('SIGKILL');
      await exited;
    }
    this.#child = null;
    this.#exited = null;
  }

  stop(): Promise<void> {
    return this.#signal('SIGTERM', this.#spec.stopTimeoutMs);
  }

  kill(): Promise<void> {
    return this.#signal('SIGKILL', 5_000);
  }

  #tail(): string {
    try {
      return readFileSync(this.logPath, 'utf8').split('\n').slice(-30).join('\n');
    } catch {
      return '(no log)';
    }
  }
}

async function answers(url: string, okStatus: (s: number) => boolean): Promise<boolean> {
  const res = await fetch(url, { signal: AbortSignal.timeout(1_000) });
  await res.arrayBuffer();
  return okStatus(res.status);
}

function makeServer(
  proc: ManagedProcess,
  port: number,
  dataDir: string,
): TestServer {
  let closed = false;
  return {
    url: `http://127.0.0.1:${port}`,
    port,
    dataDir,
    get pid() {
      return proc.pid;
    },
    stop: () => proc.stop(),
    kill: () => proc.kill(),
    async restart() {
      if (closed) throw new Error('server closed; start a new one');
      await proc.stop();
      await proc.start();
    },
    async close() {
      if (closed) return;
      closed = true;
      await proc.stop();
      rmSync(dataDir, { recursive: true, force: true });
    },
  };
}

/** Starts InfluxDB 1.x (`influxd run`) with a throw-away config, data, meta and WAL folder. */
export async function startInflux1(opts: Influx1Options = {}): Promise<Influx1Server> {
  const readyTimeoutMs = opts.readyTimeoutMs ?? 20_000;
  const stopTimeoutMs = opts.stopTimeoutMs ?? 10_000;
  // The ports are free when picked; another process may grab one before influxd binds it, so retry.
  for (let attempt = 1; ; attempt++) {
    const dataDir = mkdtempSync(join(tmpdir(), 'radcast-influx1-'));
    const httpPort = await freePort();
    let rpcPort = await freePort();
    while (rpcPort === httpPort) rpcPort = await freePort();
    const configPath = join(dataDir, 'influxdb.conf');
    writeFileSync(configPath, influx1Config(dataDir, httpPort, rpcPort, opts.admin !== undefined));
    const url = `http://127.0.0.1:${httpPort}`;
    const proc = new ManagedProcess({
      command: 'influxd',
      args: ['run', '-config', configPath],
      dataDir,
      isReady: () => answers(`${url}/ping`, (s) => s === 204),
      readyTimeoutMs,
      stopTimeoutMs,
    });
    try {
      await proc.start();
    } catch (err) {
      rmSync(dataDir, { recursive: true, force: true });
      if (attempt < 3 && /address already in use/.test(String(err))) continue;
      throw err;
    }
    const auth = opts.admin;
    const authHeader: Record<string, string> = auth
      ? { authorization: 'Basic ' + Buffer.from(`${auth.username}:${auth.password}`).toString('base64') }
      : {};
    if (auth) {
      // With auth on and no users yet, influxd accepts exactly one statement: creating the first admin.
      const body = new URLSearchParams({
        q: `CREATE USER "${auth.username.replace(/["\\]/g, '\\$&')}" WITH PASSWORD '${auth.password.replace(/['\\]/g, '\\$&')}' WITH ALL PRIVILEGES`,
      });
      const res = await fetch(`${url}/query`, { method: 'POST', body });
      if (!res.ok) throw new Error(`creating the admin user failed: ${res.status} ${await res.text()}`);
      await res.arrayBuffer().catch(() => undefined);
    }
    const base = makeServer(proc, httpPort, dataDir);
    return Object.assign(base, {
      async query(q: string, db?: string): Promise<InfluxQLResponse> {
        const params = new URLSearchParams({ q, epoch: 'ms' });
        if (db) params.set('db', db);
        const res = await fetch(`${url}/query`, { method: 'POST', body: params, headers: authHeader });
        const text = await res.text();
        if (!res.ok) throw new Error(`InfluxQL ${res.status}: ${text} (query: ${q})`);
        const json = JSON.parse(text) as InfluxQLResponse;
        const bad = json.results?.find((r) => r.error);
        if (bad) throw new Error(`InfluxQL statement ${bad.statement_id}: ${bad.error} (query: ${q})`);
        return json;
      },
      async writeLines(db: string, lines: string[], rp?: string): Promise<void> {
        const params = new URLSearchParams({ db, precision: 'ms' });
        if (rp) params.set('rp', rp);
        const res = await fetch(`${url}/write?${params}`, { method: 'POST', body: lines.join('\n'), headers: authHeader });
        const text = await res.text();
        if (res.status !== 204) throw new Error(`write ${res.status}: ${text}`);
      },
    });
  }
}

function influx1Config(dir: string, httpPort: number, rpcPort: number, authEnabled: boolean): string {
  // Only what a test needs: no usage reporting, no _internal monitoring, no CQs, quiet logs.
  return `reporting-enabled = false
bind-address = "127.0.0.1:${rpcPort}"

[meta]
  dir = "${join(dir, 'meta')}"
  logging-enabled = false

[data]
  dir = "${join(dir, 'data')}"
  wal-dir = "${join(dir, 'wal')}"
  query-log-enabled = false

[monitor]
  store-enabled = false

[subscriber]
  enabled = false

[continuous_queries]
  enabled = false

[http]
  enabled = true
  bind-address = "127.0.0.1:${httpPort}"
  auth-enabled = ${authEnabled}
  log-enabled = false
  pprof-enabled = false

[logging]
  level = "warn"
`;
}

/** Starts VictoriaMetrics; it accepts `/api/v2/write` (InfluxDB line protocol) and exports via `/api/v1/export`. */
export async function startVictoria(opts: StartOptions = {}): Promise<TestServer> {
  const readyTimeoutMs = opts.readyTimeoutMs ?? 20_000;
  const stopTimeoutMs = opts.stopTimeoutMs ?? 10_000;
  for (let attempt = 1; ; attempt++) {
    const dataDir = mkdtempSync(join(tmpdir(), 'radcast-victoria-'));
    const port = await freePort();
    const url = `http://127.0.0.1:${port}`;
    const proc = new ManagedProcess({
      command: 'victoria-metrics',
      args: [
        `-storageDataPath=${join(dataDir, 'data')}`,
        `-httpListenAddr=127.0.0.1:${port}`,
        '-search.latencyOffset=0s',
        '-search.disableCache',
        '-loggerLevel=ERROR',
      ],
      dataDir,
      isReady: () => answers(`${url}/health`, (s) => s === 200),
      readyTimeoutMs,
      stopTimeoutMs,
    });
    try {
      await proc.start();
    } catch (err) {
      rmSync(dataDir, { recursive: true, force: true });
      if (attempt < 3 && /address already in use/.test(String(err))) continue;
      throw err;
    }
    return makeServer(proc, port, dataDir);
  }
}

/** One series from VictoriaMetrics' `/api/v1/export` (JSON lines). */
export interface ExportedSeries {
  metric: Record<string, string>;
  values: number[];
  timestamps: number[];
}

/**
 * Reads every series matching `match` (a series selector such as `{__name__=~"radcast_.*"}`).
 * Export covers [startMs, endMs]; the default end is two days ahead because forecasts lie in the
 * future (VictoriaMetrics itself rejects samples more than 2 days ahead or older than its retention,
 * one month by default).
 */
export async function victoriaExport(
  url: string,
  match: string,
  range: { startMs?: number; endMs?: number } = {},
): Promise<ExportedSeries[]> {
  const params = new URLSearchParams({
    'match[]': match,
    start: String(Math.floor((range.startMs ?? 0) / 1000)),
    end: String(Math.ceil((range.endMs ?? Date.now() + 2 * 86_400_000) / 1000)),
  });
  const res = await fetch(`${url}/api/v1/export?${params}`);
  const text = await res.text();
  if (!res.ok) throw new Error(`export ${res.status}: ${text}`);
  return text
    .split('\n')
    .filter((l) => l.trim() !== '')
    .map((l) => JSON.parse(l) as ExportedSeries);
}

/**
 * Polls `/api/v1/export` until `done(series)` holds or the timeout passes, and returns the last
 * export either way so the caller's assertion shows it. A new series becomes searchable only after
 * VictoriaMetrics flushes its in-memory parts (seconds); each poll asks for that flush first
 * (`/internal/force_flush`), so polling usually ends at the first try.
 */
export async function pollVictoria(
  url: string,
  match: string,
  done: (series: ExportedSeries[]) => boolean,
  opts: { timeoutMs?: number; startMs?: number; endMs?: number } = {},
): Promise<ExportedSeries[]> {
  const deadline = Date.now() + (opts.timeoutMs ?? 10_000);
  for (;;) {
    const flushed = await fetch(`${url}/internal/force_flush`);
    await flushed.arrayBuffer();
    const series = await victoriaExport(url, match, opts);
    if (done(series) || Date.now() > deadline) return series;
    await sleep(200);
  }
}
