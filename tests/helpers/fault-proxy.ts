/**
 * An HTTP proxy on a free loopback port in front of a test server (influxd, VictoriaMetrics), for
 * fault tests. It forwards every request unchanged and can, at any moment:
 *   - delay each answer (`delayMs`): a slow store;
 *   - `mode = 'reset'`: drop each connection without an answer, as a dead server would;
 *   - `mode = 'reflect'`: answer 500 with the request headers echoed in the body, as a badly
 *     configured server or gateway might (a trap for credentials in error messages).
 * It records the write requests the server accepted (status 2xx) with their line-protocol lines
 * (gunzipped), so a test can tell whether a point was delivered once, twice or never.
 *
 *   const proxy = await startFaultProxy(influx.url);
 *   proxy.delayMs = 1500;
 *   ...
 *   proxy.acceptedLines()   // every line the server took, in order
 *   await proxy.close();
 */
import http from 'node:http';
import type { AddressInfo, Socket } from 'node:net';
import { gunzipSync } from 'node:zlib';

export interface FaultProxy {
  readonly url: string;
  readonly port: number;
  /** Delay before forwarding each request (ms). */
  delayMs: number;
  mode: 'pass' | 'reset' | 'reflect';
  /** Requests seen, by method + path (no query). */
  readonly requests: Array<{ method: string; path: string; status: number | null; startedAt: number; endedAt: number | null }>;
  /** Lines of write requests the server answered with 2xx, in arrival order. */
  acceptedLines(): string[];
  /** Requests being handled right now (forwarded or delayed). */
  readonly inFlight: number;
  /** Largest number of requests in flight at once. */
  readonly maxInFlight: number;
  close(): Promise<void>;
}

const WRITE_PATHS = new Set(['/write', '/api/v2/write']);

export async function startFaultProxy(target: string): Promise<FaultProxy> {
  const tgt = new URL(target);
  const accepted: string[] = [];
  const sockets = new Set<Socket>();
  let inFlight = 0;
  let maxInFlight = 0;
  const state = {
    delayMs: 0,
    mode: 'pass' as FaultProxy['mode'],
    requests: [] as FaultProxy['requests'],
  };

  const server = http.createServer((req, res) => {
    const chunks: Buffer[] = [];
    req.on('data', (c: Buffer) => chunks.push(c));
    req.on('end', () => {
      const path = (req.url ?? '/').split('?')[0];
      const rec: FaultProxy['requests'][number] = { method: req.method ?? 'GET', path, status: null, startedAt: Date.now(), endedAt: null };
      state.requests.push(rec);
      inFlight++;
      maxInFlight = Math.max(maxInFlight, inFlight);
      const done = () => {
        inFlight--;
        rec.endedAt = Date.now();
      };
      const body = Buffer.concat(chunks);
      const go = () => {
        if (state.mode === 'reset') {
          done();
          req.socket.destroy();
          return;
        }
        if (state.mode === 'reflect') {
          const echo = JSON.stringify({ error: 'upstream refused the request', request: { method: req.method, url: req.url, headers: req.headers } });
          res.writeHead(500, { 'content-type': 'application/json' });
          res.end(echo);
          rec.status = 500;
          done();
          return;
        }
        const up = http.request(
          { host: tgt.hostname, port: tgt.port, method: req.method, path: req.url, headers: { ...req.headers, host: tgt.host } },
          (upRes) => {
            const out: Buffer[] = [];
            upRes.on('data', (c: Buffer) => out.push(c));
            upRes.on('end', () => {
              const status = upRes.statusCode ?? 0;
              rec.status = status;
              if (WRITE_PATHS.has(path) && status >= 200 && status < 300) {
                const raw = req.headers['content-encoding'] === 'gzip' ? gunzipSync(body) : body;
                for (const l of raw.toString('utf8').split('\n')) if (l.trim() !== '') accepted.push(l);
              }
              res.writeHead(status, upRes.headers);
              res.end(Buffer.concat(out));
              done();
            });
            upRes.on('error', () => {
              done();
              req.socket.destroy();
            });
          },
        );
        // The server is down: the client sees its connection dropped, as with a dead server.
        up.on('error', () => {
          done();
          req.socket.destroy();
        });
        up.end(body);
      };
      if (state.delayMs > 0) setTimeout(go, state.delayMs);
      else go();
    });
  });
  server.on('connection', (s) => {
    sockets.add(s);
    s.on('close', () => sockets.delete(s));
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  const port = (server.address() as AddressInfo).port;

  return {
    url: `http://127.0.0.1:${port}`,
    port,
    get delayMs() {
      return state.delayMs;
    },
    set delayMs(v: number) {
      state.delayMs = v;
    },
    get mode() {
      return state.mode;
    },
    set mode(m: FaultProxy['mode']) {
      state.mode = m;
    },
    get requests() {
      return state.requests;
    },
    acceptedLines: () => [...accepted],
    get inFlight() {
      return inFlight;
    },
    get maxInFlight() {
      return maxInFlight;
    },
    async close() {
      const closed = new Promise<void>((resolve) => server.close(() => resolve()));
      for (const s of sockets) s.destroy();
      await closed;
    },
  };
}

/**
 * The identity of a line-protocol point: measurement + tag set + timestamp (what InfluxDB keeps
 * one point per). Escaped commas and spaces in names are kept as written.
 */
export function pointKey(line: string): string {
  // measurement,tags fields timestamp — split on unescaped spaces.
  const parts: string[] = [];
  let cur = '';
  let quoted = false;
  for (let i = 0; i < line.length; i++) {
    const c = line[i];
    if (c === '\\' && i + 1 < line.length) {
      cur += c + line[i + 1];
      i++;
      continue;
    }
    if (c === '"') quoted = !quoted;
    if (c === ' ' && !quoted) {
      parts.push(cur);
      cur = '';
      continue;
    }
    cur += c;
  }
  parts.push(cur);
  return `${parts[0]} @${parts[2] ?? ''}`;
}

/** How often each point key occurs among `lines` whose measurement is `measurement`. */
export function countPoints(lines: string[], measurement: string): Map<string, number> {
  const out = new Map<string, number>();
  for (const l of lines) {
    if (!(l.startsWith(`${measurement},`) || l.startsWith(`${measurement} `))) continue;
    const k = pointKey(l);
    out.set(k, (out.get(k) ?? 0) + 1);
  }
  return out;
}
