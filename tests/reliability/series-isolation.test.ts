/**
 * One bad series must not take the others down. The real daemon (embedded store, HTTP, manual
 * clock) runs six series: two healthy, one whose fit throws an error without a code, one whose fit
 * throws a coded error, one whose store read throws something that is not even an Error, and one
 * whose data are garbage (a single day of readings, mixed with NaN and text). Each bad series
 * fails alone with its code; the healthy ones are forecast in every cycle; each failure is counted
 * in /metrics under its series and code and shown on the page; the next cycle tries again.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { InlineFitter } from '../../src/daemon/pool.ts';
import { ModelError } from '../../src/model/errors.ts';
import type { Fitter, FitRequest } from '../../src/daemon/ports.ts';
import type { Reading } from '../../src/series/types.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { heatLoad, hookStore, HOUR, loadOrThrow, metricValue, startClockedDaemon, writeConfig, type ClockedDaemon, type HookedStore } from '../helpers/fault-daemon.ts';
import { FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';

const NOW = Date.UTC(2026, 2, 3, 0, 4);
const END = Math.floor(NOW / HOUR) * HOUR;
const GOOD = ['oskaveld-north', 'tarrow-hill'];
const THROWS_PLAIN = 'brennick-yard';
const THROWS_CODED = 'brennick-yard-east';
const READ_THROWS = 'oskaveld-south';
const GARBAGE = 'tarrow-hill-annex';
const ALL = [GOOD[0], THROWS_PLAIN, THROWS_CODED, READ_THROWS, GARBAGE, GOOD[1]];

/** The real inline fitter, except for two series whose fit blows up. */
class SabotagedFitter implements Fitter {
  readonly kind = 'inline' as const;
  readonly #inner = new InlineFitter();
  calls = new Map<string, number>();
  get queued() {
    return 0;
  }
  async fitAndForecast(req: FitRequest, signal?: AbortSignal) {
    const name = req.settings.series;
    this.calls.set(name, (this.calls.get(name) ?? 0) + 1);
    if (name === THROWS_PLAIN) throw new TypeError("Cannot read properties of undefined (reading 'centres')");
    if (name === THROWS_CODED) throw new ModelError('SINGULAR_SYSTEM', 'ridge system has no solution', { where: 'gram' }, 'raise ridge');
    return this.#inner.fitAndForecast(req, signal);
  }
  async stop() {
    await this.#inner.stop();
  }
}

let dir: string;
let d: ClockedDaemon;
let store: HookedStore;
let fitter: SabotagedFitter;
const trap = trapUnhandled();
const cap = captureLogger('info');

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-isolation-'));
  const emb = new EmbeddedStore({ path: join(dir, 'store.db') });
  ALL.forEach((s, i) => emb.writeReadings(s, heatLoad(END - 400 * HOUR, END + 24 * HOUR, i + 1)));
  const junk: Reading[] = heatLoad(END - 24 * HOUR, END + 24 * HOUR, 9).map((r, i) => (i % 3 === 0 ? { ...r, v: NaN } : r));
  emb.deleteReadings(GARBAGE);
  emb.writeReadings(GARBAGE, junk);
  const file = writeConfig(dir, {
    store: { kind: 'embedded', embedded: { path: join(dir, 'store.db') } },
    state: { path: join(dir, 'state.db') },
    http: { port: 0 },
    daemon: { concurrency: 1, watchConfig: false },
    defaults: { ...FAST_SERIES, refit: '5 * * * *' },
    series: ALL.map((name) => ({ name })),
  });
  store = hookStore(emb);
  store.beforeRead = (sel) => {
    if (sel.name === READ_THROWS) throw null; // eslint-disable-line no-throw-literal
  };
  fitter = new SabotagedFitter();
  d = await startClockedDaemon({ loaded: loadOrThrow(file), logger: cap.logger, startMs: NOW, store, fitter });
});
afterAll(async () => {
  await d?.daemon.stop();
  trap.dispose();
  rmSync(dir, { recursive: true, force: true });
});

describe('a failing series fails alone', () => {
  it('three cycles: the healthy series are forecast every time, each bad one fails with its own code every time', async () => {
    for (let c = 0; c < 3; c++) await d.hour();
    const st = new Map(d.daemon.statuses().map((s) => [s.series, s]));
    for (const g of GOOD) {
      expect(st.get(g)!.lastError, g).toBeNull();
      expect(store.forecasts.filter((b) => b.series === g)).toHaveLength(3);
    }
    expect(st.get(THROWS_PLAIN)!.lastError!.code).toBe('INTERNAL');
    expect(st.get(THROWS_CODED)!.lastError!.code).toBe('SINGULAR_SYSTEM');
    expect(st.get(READ_THROWS)!.lastError!.code).toBe('INTERNAL');
    expect(st.get(GARBAGE)!.lastError!.code).toBe('TOO_LITTLE_HISTORY');
    for (const b of [THROWS_PLAIN, THROWS_CODED, READ_THROWS, GARBAGE]) {
      expect(st.get(b)!.consecutiveFailures, b).toBe(3);
      expect(store.forecasts.filter((x) => x.series === b), b).toHaveLength(0);
    }
    // Tried again every cycle, not given up on.
    expect(fitter.calls.get(THROWS_PLAIN)).toBe(3);
    expect(fitter.calls.get(THROWS_CODED)).toBe(3);
  });

  it('/metrics counts each failure under its series and error code', async () => {
    const m = (await d.get('/metrics')).text;
    expect(metricValue(m, `radcast_series_failures_total{series="${THROWS_PLAIN}",code="INTERNAL"}`)).toBe(3);
    expect(metricValue(m, `radcast_series_failures_total{series="${THROWS_CODED}",code="SINGULAR_SYSTEM"}`)).toBe(3);
    expect(metricValue(m, `radcast_series_failures_total{series="${READ_THROWS}",code="INTERNAL"}`)).toBe(3);
    expect(metricValue(m, `radcast_series_failures_total{series="${GARBAGE}",code="TOO_LITTLE_HISTORY"}`)).toBe(3);
    for (const g of GOOD) expect(m).not.toContain(`radcast_series_failures_total{series="${g}"`);
    expect(metricValue(m, 'radcast_cycles_total{outcome="ok"}')).toBe(6);
    expect(metricValue(m, 'radcast_cycles_total{outcome="failed"}')).toBe(12);
  });

  it('the page lists the error code of each failing series; /readyz stays ready', async () => {
    const html = (await d.get('/')).text;
    for (const code of ['INTERNAL', 'SINGULAR_SYSTEM', 'TOO_LITTLE_HISTORY']) expect(html).toContain(`>${code}</span>`);
    expect(html).toMatch(/failing 4/);
    expect((await d.get('/readyz')).status).toBe(200);
  });

  it('every failure is logged once per cycle with series, code and stage; nothing escapes as an unhandled rejection', () => {
    const failed = cap.lines.filter((l) => l.msg === 'series cycle failed; retried next cycle');
    expect(failed).toHaveLength(12);
    const stages = new Map(failed.map((l) => [l.series as string, l.stage]));
    expect(Object.fromEntries(stages)).toEqual({ [THROWS_PLAIN]: 'fit', [THROWS_CODED]: 'fit', [READ_THROWS]: 'read', [GARBAGE]: 'fit' });
    expect(trap.errors).toEqual([]);
  });

  it('when the fault goes away the series recovers on its next tick', async () => {
    store.beforeRead = undefined;
    await d.hour();
    const st = d.daemon.statuses().find((s) => s.series === READ_THROWS)!;
    expect(st.lastError).toBeNull();
    expect(st.consecutiveFailures).toBe(0);
    expect(store.forecasts.filter((b) => b.series === READ_THROWS)).toHaveLength(1);
  });
});
