/**
 * The daemon's HTTP side (node:http, read-only, bound to 127.0.0.1 unless configured):
 *   GET /healthz            200 while the process runs
 *   GET /readyz             200 when the store answers and the config is valid, else 503; JSON body lists each check
 *   GET /metrics            Prometheus text format (prom-client)
 *   GET /                   status page (series, drift state, charts); ?page=N&filter=TEXT
 *   GET /api/series         JSON list of series statuses
 *   GET /api/series/NAME    JSON chart data of one series (actuals, latest forecast, band)
 *   GET /assets/*           chart.js, the page script and style
 * Anything else is 404; methods other than GET/HEAD are 405.
 */
import http from 'node:http';
import { readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import path from 'node:path';
import type { AddressInfo } from 'node:net';
import type { Logger } from 'pino';
import type { DaemonMetrics } from './metrics.ts';
import type { SeriesStatus } from './status.ts';
import { PAGE_CSS, renderPage, type ChartData } from './page.ts';
import { describeError } from './errors.ts';

export interface ReadyCheck {
  ok: boolean;
  detail?: string;
}

export interface HttpSource {
  statuses(): SeriesStatus[];
  readiness(): Promise<Record<string, ReadyCheck>>;
  /** null = no such series. */
  chartData(series: string): Promise<ChartData | null>;
}

export interface HttpServerOptions {
  host: string;
  /** 0 = any free port. */
  port: number;
  source: HttpSource;
  metrics: DaemonMetrics;
  logger: Logger;
  title?: string;
  now?: () => number;
}

const require = createRequire(import.meta.url);

interface Asset {
  body: Buffer;
  type: string;
}

function loadAssets(): Map<string, Asset> {
  const assets = new Map<string, Asset>();
  // chart.js exports no subpath for its UMD build; it sits beside the CommonJS entry.
  const chartPath = path.join(path.dirname(require.resolve('chart.js')), 'chart.umd.min.js');
  assets.set('/assets/chart.umd.min.js', { body: readFileSync(chartPath), type: 'text/javascript; charset=utf-8' });
  assets.set('/assets/page.js', { body: readFileSync(new URL('./page-client.js', import.meta.url)), type: 'text/javascript; charset=utf-8' });
  assets.set('/assets/page.css', { body: Buffer.from(PAGE_CSS), type: 'text/css; charset=utf-8' });
  return assets;
}

const SECURITY_HEADERS: Record<string, string> = {
  'content-security-policy': "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; connect-src 'self'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'",
  'x-content-type-options': 'nosniff',
  'referrer-policy': 'no-referrer',
  'cache-control': 'no-store',
};

export class HttpServer {
  readonly #opts: HttpServerOptions;
  readonly #assets: Map<string, Asset>;
  #server: http.Server | null = null;
  #sockets = new Set<import('node:net').Socket>();

  constructor(opts: HttpServerOptions) {
    this.#opts = opts;
    this.#assets = loadAssets();
  }

  /** Listen; resolves with the bound address. */
  async start(): Promise<AddressInfo> {
    if (this.#server) return this.#server.address() as AddressInfo;
    const server = http.createServer((req, res) => {
      this.#handle(req, res).catch((err) => {
        this.#opts.logger.error({ err: describeError(err), url: req.url }, 'http handler failed');
        if (!res.headersSent) this.#send(res, 500, 'text/plain; charset=utf-8', 'internal error\n');
        else res.destroy();
      });
    });
    server.keepAliveTimeout = 5000;
    server.headersTimeout = 10_000;
    server.requestTimeout = 30_000;
    server.on('connection', (s) => {
      this.#sockets.add(s);
      s.on('close', () => this.#sockets.delete(s));
    });
    await new Promise<void>((resolve, reject) => {
      server.once('error', reject);
      server.listen(this.#opts.port, this.#opts.host, () => {
        server.off('error', reject);
        resolve();
      });
    });
    this.#server = server;
    const addr = server.address() as AddressInfo;
    this.#opts.logger.info({ host: addr.address, port: addr.port }, 'http listening');
    return addr;
  }

  get address(): AddressInfo | null {
    return (this.#server?.address() as AddressInfo | null) ?? null;
  }

  /** Stop accepting, end idle keep-alive sockets, wait for in-flight responses (bounded). */
  async stop(timeoutMs = 2000): Promise<void> {
    const server = this.#server;
    if (!server) return;
    this.#server = null;
    const closed = new Promise<void>((resolve) => server.close(() => resolve()));
    server.closeIdleConnections();
    const timer = setTimeout(() => {
      for (const s of this.#sockets) s.destroy();
    }, timeoutMs);
    await closed;
    clearTimeout(timer);
  }

  async flush(): Promise<void> {
    // Nothing buffered: responses are written as they are produced.
  }

  async #handle(req: http.IncomingMessage, res: http.ServerResponse): Promise<void> {
    if (req.method !== 'GET' && req.method !== 'HEAD') {
      res.setHeader('allow', 'GET, HEAD');
      return this.#send(res, 405, 'text/plain; charset=utf-8', 'read-only: only GET and HEAD\n');
    }
    const url = new URL(req.url ?? '/', 'http://localhost');
    const path = url.pathname;
    if (path === '/healthz') return this.#json(res, 200, { status: 'alive' });
    if (path === '/readyz') {
      const checks = await this.#opts.source.readiness();
      const ready = Object.values(checks).every((c) => c.ok);
      return this.#json(res, ready ? 200 : 503, { ready, checks });
    }
    if (path === '/metrics') {
      const text = await this.#opts.metrics.text();
      return this.#send(res, 200, this.#opts.metrics.contentType, text);
    }
    if (path === '/' || path === '/index.html') {
      const page = Number.parseInt(url.searchParams.get('page') ?? '1', 10);
      const html = renderPage(this.#opts.source.statuses(), {
        title: this.#opts.title ?? 'radcast',
        nowMs: (this.#opts.now ?? Date.now)(),
        page: Number.isFinite(page) ? page : 1,
        filter: url.searchParams.get('filter') ?? undefined,
      });
      return this.#send(res, 200, 'text/html; charset=utf-8', html);
    }
    if (path === '/api/series') {
      const list = this.#opts.source.statuses().map((s) => ({ ...s, latestForecast: s.latestForecast ? { issuedAt: s.latestForecast.issuedAt, steps: s.latestForecast.points.length } : null }));
      return this.#json(res, 200, { series: list });
    }
    if (path.startsWith('/api/series/')) {
      let name: string;
      try {
        name = decodeURIComponent(path.slice('/api/series/'.length));
      } catch {
        return this.#json(res, 400, { error: 'BAD_SERIES_NAME', message: 'series name is not valid percent-encoding' });
      }
      const data = await this.#opts.source.chartData(name);
      if (!data) return this.#json(res, 404, { error: 'UNKNOWN_SERIES', message: 'no such series in the running config' });
      return this.#json(res, 200, data);
    }
    if (path === '/favicon.ico') {
      // No icon; answer so browsers do not log a 404 on every visit.
      res.statusCode = 204;
      for (const [k, v] of Object.entries(SECURITY_HEADERS)) res.setHeader(k, v);
      res.end();
      return;
    }
    const asset = this.#assets.get(path);
    if (asset) return this.#send(res, 200, asset.type, asset.body);
    return this.#send(res, 404, 'text/plain; charset=utf-8', 'not found\n');
  }

  #json(res: http.ServerResponse, status: number, body: unknown): void {
    // Non-finite numbers become null; "<" is escaped so the JSON is safe anywhere.
    const text = JSON.stringify(body, (_k, v) => (typeof v === 'number' && !Number.isFinite(v) ? null : v)).replace(/</g, '\\u003c');
    this.#send(res, status, 'application/json; charset=utf-8', text);
  }

  #send(res: http.ServerResponse, status: number, type: string, body: string | Buffer): void {
    const buf = typeof body === 'string' ? Buffer.from(body) : body;
    res.statusCode = status;
    for (const [k, v] of Object.entries(SECURITY_HEADERS)) res.setHeader(k, v);
    res.setHeader('content-type', type);
    res.setHeader('content-length', buf.length);
    res.end(res.req.method === 'HEAD' ? undefined : buf);
  }
}
