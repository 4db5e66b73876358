/**
 * The webhook notifier against a real HTTP receiver on loopback and a real state file:
 * one message per transition, retries with backoff while the receiver is down, delivery after it
 * is back (also with a new notifier on the same state file, i.e. across a daemon restart), the
 * outbox bound, timeouts, and the webhook URL (a secret) never showing up in logs or the outbox.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { createServer, type IncomingMessage, type Server, type ServerResponse } from 'node:http';
import type { AddressInfo } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import pino from 'pino';
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { assessDrift, DRIFT_DEFAULTS, type DriftNotice, type MaturedError } from '../../src/drift/index.ts';
import { ManualClock } from '../../src/daemon/clock.ts';
import { WebhookNotifier, type WebhookBody } from '../../src/daemon/webhook.ts';
import { StateStore } from '../../src/store/state.ts';

const HOUR = 3_600_000;
const T0 = Date.UTC(2026, 10, 2, 6);
const TOKEN = 'tok-7d1f0c9e-SECRET';

interface Receiver {
  port: number;
  bodies: WebhookBody[];
  /** Answer of the next requests: status (and headers); default 204. */
  answers: { status: number; headers?: Record<string, string>; hang?: boolean }[];
  paths: string[];
  /** Requests that reached the server. */
  arrived: number;
  close(): Promise<void>;
}

async function startReceiver(port = 0): Promise<Receiver> {
  const r: Receiver = { port: 0, bodies: [], answers: [], paths: [], arrived: 0, close: async () => undefined };
  const server: Server = createServer((req: IncomingMessage, res: ServerResponse) => {
    // The answer is chosen when the request arrives (in arrival order).
    const a = r.answers.shift() ?? { status: 204 };
    r.arrived++;
    const chunks: Buffer[] = [];
    req.on('data', (c: Buffer) => chunks.push(c));
    req.on('end', () => {
      if (a.hang) return; // never answer
      r.paths.push(req.url ?? '');
      if (a.status >= 200 && a.status < 300) r.bodies.push(JSON.parse(Buffer.concat(chunks).toString('utf8')) as WebhookBody);
      res.writeHead(a.status, a.headers ?? {});
      res.end();
    });
  });
  await new Promise<void>((resolve) => server.listen(port, '127.0.0.1', resolve));
  r.port = (server.address() as AddressInfo).port;
  r.close = () =>
    new Promise<void>((resolve) => {
      server.closeAllConnections();
      server.close(() => resolve());
    });
  return r;
}

/** A free loopback port with nothing listening on it (connections are refused). */
async function downPort(): Promise<number> {
  const r = await startReceiver();
  await r.close();
  return r.port;
}

function captureLogs() {
  const lines: string[] = [];
  const logger = pino({ level: 'debug' }, { write: (s: string) => void lines.push(s) });
  return { logger, lines, records: () => lines.map((l) => JSON.parse(l) as Record<string, unknown>) };
}

/** Real notices from assessDrift: calm, a 5-day drift, calm again (ok>watch, watch>alert, alert>ok). */
function transitionNotices(series: string, repeatAlertMs = 0): DriftNotice[] {
  const ratios = [...new Array(5 * 24).fill(1), ...new Array(5 * 24).fill(6), ...new Array(6 * 24).fill(1)];
  let prior: unknown = null;
  const out: DriftNotice[] = [];
  ratios.forEach((ratio, i) => {
    const now = T0 + i * HOUR;
    const matured: MaturedError[] = Array.from({ length: 24 }, (_, h) => ({ t: now, lead: h + 1, scaledError: 0.7 * ratio }));
    const r = assessDrift({ series, prior, matured, novelty: [], lastReadingAt: now, now, stepMs: HOUR, baselineMase: 0.7, settings: { ...DRIFT_DEFAULTS, repeatAlertMs } });
    prior = r.memory;
    if (r.notice) out.push(r.notice);
  });
  return out;
}

let dir: string;
let store: StateStore;
let receivers: Receiver[] = [];
let notifiers: WebhookNotifier[] = [];

beforeEach(() => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-webhook-'));
  store = new StateStore({ path: join(dir, 'state.db') });
});

afterEach(async () => {
  for (const n of notifiers) await n.stop();
  for (const r of receivers) await r.close();
  notifiers = [];
  receivers = [];
  try {
    store.close();
  } catch {
    // already closed by the test
  }
  rmSync(dir, { recursive: true, force: true });
});

function notifier(opts: { store?: StateStore; clock: ManualClock; urls: Record<string, string>; logger?: pino.Logger; maxPending?: number; timeoutMs?: number }): WebhookNotifier {
  const n = new WebhookNotifier({
    outbox: opts.store ?? store,
    urlFor: (s) => opts.urls[s],
    clock: opts.clock,
    logger: opts.logger ?? captureLogs().logger,
    jitter: false,
    retryBaseMs: 5_000,
    retryCapMs: 60_000,
    ...(opts.maxPending !== undefined ? { maxPending: opts.maxPending } : {}),
    ...(opts.timeoutMs !== undefined ? { timeoutMs: opts.timeoutMs } : {}),
  });
  notifiers.push(n);
  return n;
}

describe('webhook notifier', () => {
  it('a receiver on loopback gets exactly one message per transition, in order', async () => {
    const rx = await startReceiver();
    receivers.push(rx);
    const clock = new ManualClock(T0 + 20 * 24 * HOUR);
    const notices = {
      'oskaveld-north': transitionNotices('oskaveld-north'),
      'tarrow-hill': transitionNotices('tarrow-hill'),
    };
    expect(notices['oskaveld-north'].map((n) => `${n.from}>${n.to}`)).toEqual(['ok>watch', 'watch>alert', 'alert>ok']);
    for (const [series, list] of Object.entries(notices)) for (const n of list) store.enqueue(series, 'drift', n, n.at);
    const urls = { 'oskaveld-north': `http://127.0.0.1:${rx.port}/hook/north`, 'tarrow-hill': `http://127.0.0.1:${rx.port}/hook/tarrow` };
    const n = notifier({ clock, urls });
    expect(await n.flush()).toEqual({ delivered: 6, failed: 0, dropped: 0 });
    expect(await n.flush()).toEqual({ delivered: 0, failed: 0, dropped: 0 });
    expect(store.outboxSize()).toBe(0);
    for (const series of Object.keys(notices)) {
      const got = rx.bodies.filter((b) => b.series === series);
      expect(got.map((b) => `${b.from}>${b.to}`)).toEqual(['ok>watch', 'watch>alert', 'alert>ok']);
      expect(new Set(got.map((b) => b.id)).size).toBe(3);
      const alert = got[1];
      const src = notices[series as keyof typeof notices][1];
      expect(alert).toMatchObject({ source: 'radcast', kind: 'transition', to: 'alert', toCode: 2, reason: 'error-drift', atMs: src.at, at: new Date(src.at).toISOString(), attempt: 1 });
      expect(alert.figures.statistic).toBeGreaterThanOrEqual(DRIFT_DEFAULTS.alertThreshold);
      expect(alert.figures.baselineMase).toBe(0.7);
      expect(alert.figures.recentMase).toBeGreaterThan(0.7);
    }
    expect(rx.paths.filter((p) => p === '/hook/north')).toHaveLength(3);
  });

  it('alert reminders at the configured interval arrive as their own messages', async () => {
    const rx = await startReceiver();
    receivers.push(rx);
    const notices = transitionNotices('brennick-yard', 24 * HOUR);
    const kinds = notices.map((n) => n.kind);
    expect(kinds.filter((k) => k === 'reminder').length).toBeGreaterThanOrEqual(3);
    for (const n of notices) store.enqueue('brennick-yard', 'drift', n, n.at);
    const n = notifier({ clock: new ManualClock(T0 + 30 * 24 * HOUR), urls: { 'brennick-yard': `http://127.0.0.1:${rx.port}/h` } });
    await n.flush();
    expect(rx.bodies.map((b) => b.kind)).toEqual(kinds);
  });

  it('with the receiver down the message is retried with backoff and delivered once it is back', async () => {
    const port = await downPort();
    const clock = new ManualClock(T0);
    const { logger, records } = captureLogs();
    const [notice] = transitionNotices('oskaveld-north');
    store.enqueue('oskaveld-north', 'drift', notice, clock.now());
    const n = notifier({ clock, logger, urls: { 'oskaveld-north': `http://127.0.0.1:${port}/hook` } });

    expect(await n.flush()).toMatchObject({ delivered: 0, failed: 1 });
    let [e] = store.pendingNotifications();
    expect(e).toMatchObject({ attempts: 1, nextAttemptAt: T0 + 5_000, lastError: 'WEBHOOK_NETWORK' });
    // Not due yet: no attempt.
    await clock.advance(4_999);
    expect(await n.flush()).toMatchObject({ delivered: 0, failed: 0 });
    await clock.advance(1);
    expect(await n.flush()).toMatchObject({ failed: 1 });
    [e] = store.pendingNotifications();
    expect(e).toMatchObject({ attempts: 2, nextAttemptAt: T0 + 5_000 + 10_000 });

    const rx = await startReceiver(port);
    receivers.push(rx);
    await clock.advance(10_000);
    expect(await n.flush()).toMatchObject({ delivered: 1, failed: 0 });
    expect(rx.bodies).toHaveLength(1);
    expect(rx.bodies[0]).toMatchObject({ attempt: 3, from: 'ok', to: 'watch' });
    expect(store.outboxSize()).toBe(0);
    await clock.advance(60_000);
    await n.flush();
    expect(rx.bodies).toHaveLength(1);
    const fails = records().filter((r) => r.code === 'WEBHOOK_NETWORK');
    expect(fails.map((r) => r.retryInMs)).toEqual([5_000, 10_000]);
  });

  it('a notice left in the outbox is delivered by a new notifier on the same state file (daemon restart)', async () => {
    const port = await downPort();
    const clock = new ManualClock(T0);
    const notices = transitionNotices('oskaveld-north');
    for (const x of notices.slice(0, 2)) store.enqueue('oskaveld-north', 'drift', x, clock.now());
    const urls = { 'oskaveld-north': `http://127.0.0.1:${port}/hook?key=${TOKEN}` };
    const first = notifier({ clock, urls });
    first.start();
    await clock.advance(0);
    await vi.waitFor(() => expect(store.pendingNotifications()[0].attempts).toBe(1));
    await first.stop();
    store.close();

    // "Restart": a new state store handle and a new notifier on the same file.
    const reopened = new StateStore({ path: join(dir, 'state.db') });
    store = reopened;
    expect(reopened.outboxSize()).toBe(2);
    const rx = await startReceiver(port);
    receivers.push(rx);
    const clock2 = new ManualClock(T0 + 1_000);
    const second = notifier({ store: reopened, clock: clock2, urls });
    // The persisted backoff holds: nothing is sent before the stored next attempt time.
    expect(await second.flush()).toMatchObject({ delivered: 0, failed: 0 });
    await clock2.advance(4_000);
    second.start();
    await clock2.advance(0);
    await vi.waitFor(() => expect(rx.bodies).toHaveLength(2));
    expect(rx.bodies.map((b) => `${b.from}>${b.to}`)).toEqual(['ok>watch', 'watch>alert']);
    expect(rx.bodies[0].attempt).toBe(2);
    expect(reopened.outboxSize()).toBe(0);
  });

  it("a failing series does not hold back another series' notices, and keeps its own order", async () => {
    const rx = await startReceiver();
    receivers.push(rx);
    const port = await downPort();
    const clock = new ManualClock(T0);
    for (const x of transitionNotices('tarrow-hill')) store.enqueue('tarrow-hill', 'drift', x, clock.now());
    for (const x of transitionNotices('brennick-yard')) store.enqueue('brennick-yard', 'drift', x, clock.now());
    const n = notifier({ clock, urls: { 'tarrow-hill': `http://127.0.0.1:${port}/down`, 'brennick-yard': `http://127.0.0.1:${rx.port}/up` } });
    for (let i = 0; i < 3; i++) await n.flush();
    expect(rx.bodies.map((b) => b.series)).toEqual(['brennick-yard', 'brennick-yard', 'brennick-yard']);
    const left = store.pendingNotifications<DriftNotice>();
    expect(left.map((e) => e.payload.to)).toEqual(['watch', 'alert', 'ok']);
    // Only the head of the failing series was tried.
    expect(left.map((e) => e.attempts)).toEqual([1, 0, 0]);
  });

  it("honours the receiver's Retry-After on 503 and logs 4xx answers at error level", async () => {
    const rx = await startReceiver();
    receivers.push(rx);
    rx.answers.push({ status: 503, headers: { 'retry-after': '30' } }, { status: 401 });
    const clock = new ManualClock(T0);
    const { logger, records } = captureLogs();
    store.enqueue('oskaveld-north', 'drift', transitionNotices('oskaveld-north')[0], clock.now());
    const n = notifier({ clock, logger, urls: { 'oskaveld-north': `http://127.0.0.1:${rx.port}/hook/${TOKEN}` } });
    await n.flush();
    expect(store.pendingNotifications()[0]).toMatchObject({ nextAttemptAt: T0 + 30_000, lastError: 'WEBHOOK_HTTP 503' });
    await clock.advance(30_000);
    await n.flush();
    expect(store.pendingNotifications()[0]).toMatchObject({ attempts: 2, lastError: 'WEBHOOK_HTTP 401' });
    const r401 = records().find((r) => r.status === 401)!;
    expect(r401.level).toBe(50); // pino error
    expect(String(r401.hint)).toMatch(/credentials/);
    await clock.advance(60_000);
    await n.flush();
    expect(rx.bodies).toHaveLength(1);
  });

  it('a receiver that never answers times out, and the notice is retried', async () => {
    const rx = await startReceiver();
    receivers.push(rx);
    rx.answers.push({ status: 200, hang: true });
    const clock = new ManualClock(T0);
    store.enqueue('oskaveld-north', 'drift', transitionNotices('oskaveld-north')[0], clock.now());
    const n = notifier({ clock, timeoutMs: 2_000, urls: { 'oskaveld-north': `http://127.0.0.1:${rx.port}/slow` } });
    const pass = n.flush();
    // Let the request reach the receiver before the (fake) time runs out.
    await vi.waitFor(() => expect(rx.arrived).toBe(1));
    expect(clock.pendingTimers).toBe(1);
    await clock.advance(2_000);
    expect(await pass).toMatchObject({ failed: 1 });
    expect(store.pendingNotifications()[0]).toMatchObject({ lastError: 'WEBHOOK_TIMEOUT', nextAttemptAt: T0 + 2_000 + 5_000 });
    await clock.advance(5_000);
    expect(await n.flush()).toMatchObject({ delivered: 1 });
  });

  it('the outbox is bounded: beyond maxPending the oldest notices are dropped, counted and logged', async () => {
    const rx = await startReceiver();
    receivers.push(rx);
    const clock = new ManualClock(T0);
    const { logger, records } = captureLogs();
    const all = [...transitionNotices('oskaveld-north'), ...transitionNotices('oskaveld-north', 24 * HOUR)].slice(0, 5);
    for (const x of all) store.enqueue('oskaveld-north', 'drift', x, clock.now());
    const n = notifier({ clock, logger, maxPending: 3, urls: { 'oskaveld-north': `http://127.0.0.1:${rx.port}/h` } });
    expect(await n.flush()).toEqual({ delivered: 3, failed: 0, dropped: 2 });
    expect(rx.bodies.map((b) => b.atMs)).toEqual(all.slice(2).map((x) => x.at));
    expect(n.counts).toEqual({ delivered: 3, failed: 0, dropped: 2 });
    expect(records().filter((r) => r.code === 'WEBHOOK_OUTBOX_FULL')).toHaveLength(1);
  });

  it('never writes the webhook URL (a secret) to the logs or the outbox', async () => {
    const port = await downPort();
    const clock = new ManualClock(T0);
    const { logger, lines } = captureLogs();
    store.enqueue('oskaveld-north', 'drift', transitionNotices('oskaveld-north')[0], clock.now());
    const url = `http://127.0.0.1:${port}/hook/${TOKEN}?key=${TOKEN}`;
    const n = notifier({ clock, logger, urls: { 'oskaveld-north': url } });
    await n.flush();
    const rx = await startReceiver(port);
    receivers.push(rx);
    rx.answers.push({ status: 403 });
    await clock.advance(5_000);
    await n.flush();
    await clock.advance(10_000);
    await n.flush();
    expect(rx.bodies).toHaveLength(1);
    expect(lines.length).toBeGreaterThanOrEqual(3);
    for (const l of lines) expect(l).not.toContain(TOKEN);
    expect(JSON.stringify(rx.bodies)).not.toContain(TOKEN);
    expect(rx.paths).toContain(`/hook/${TOKEN}?key=${TOKEN}`);
  });
});
