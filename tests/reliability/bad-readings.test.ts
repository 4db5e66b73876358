/**
 * Bad readings through the real series cycle (read → regularise → fit → predict → write → score →
 * drift): NaN, ±Infinity, strings, null, huge magnitudes, duplicate and out-of-order timestamps,
 * timestamps far in the future, a clock jump, daylight-saving transitions, constant series and
 * all-missing windows. For every input: the cycle never throws, no non-finite number reaches the
 * store, and the outcome is either a valid forecast or a failure with a documented error code.
 *
 * fast-check mutates a clean hourly series (random mix of the faults above); hand-picked cases pin
 * the expected outcome of each fault on its own.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import Database from 'better-sqlite3';
import { SeriesCycle, type SeriesCycleResult } from '../../src/daemon/cycle.ts';
import { InlineFitter } from '../../src/daemon/pool.ts';
import { DaemonMetrics } from '../../src/daemon/metrics.ts';
import { CycleDriftAssessor } from '../../src/daemon/drift-adapter.ts';
import type { DriftBaseline } from '../../src/daemon/state-adapter.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import type { Reading } from '../../src/series/types.ts';
import type { SourceSelector } from '../../src/store/types.ts';
import type { ResolvedSeries } from '../../src/config/resolve.ts';
import { MemoryState, MemoryStore, resolved } from '../unit/daemon/fakes.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { batchProblems, DOCUMENTED_CYCLE_CODES, FAST_SERIES, healthProblems, trapUnhandled } from '../helpers/fault-cycle.ts';

const H = 3_600_000;
const NOW = Date.UTC(2026, 0, 20, 0, 5); // a winter Tuesday, 00:05 UTC
const END = Math.floor(NOW / H) * H;

function cleanSeries(endMs: number, steps: number, seed = 1): Reading[] {
  const out: Reading[] = [];
  let x = seed;
  for (let i = steps; i >= 1; i--) {
    const t = endMs - i * H;
    x = (x * 1103515245 + 12345) % 2 ** 31;
    const hour = (t / H) % 24;
    out.push({ t, v: 400 + 90 * Math.sin((2 * Math.PI * (hour - 6)) / 24) + (x / 2 ** 31 - 0.5) * 20 });
  }
  return out;
}

function memoryBaselines() {
  const m = new Map<string, DriftBaseline>();
  return { getBaseline: (s: string) => m.get(s) ?? null, putBaseline: (s: string, b: DriftBaseline) => void m.set(s, b) };
}

const trap = trapUnhandled();
afterAll(() => trap.dispose());

/**
 * A store that hands back exactly the rows it holds, whatever they are (no range filter, no type
 * check): the cycle must cope with an adapter that returns garbage.
 */
class RawStore extends MemoryStore {
  override async readReadings(sel: SourceSelector): Promise<Reading[]> {
    this.reads++;
    return [...(this.readings.get(sel.name) ?? [])];
  }
}

function setup(series: ResolvedSeries) {
  const store = new RawStore();
  const state = new MemoryState();
  const metrics = new DaemonMetrics({ defaultMetrics: false });
  const cap = captureLogger('warn');
  const cycle = new SeriesCycle({
    store,
    state,
    fitter: new InlineFitter(),
    logger: cap.logger,
    metrics,
    drift: new CycleDriftAssessor({ baselines: memoryBaselines(), logger: cap.logger }),
  });
  return { store, state, metrics, cycle, cap };
}

/** The invariants every cycle must keep, whatever it was fed. */
function checkOutcome(res: SeriesCycleResult, store: MemoryStore, r: ResolvedSeries, forecastsBefore: number): void {
  const written = store.forecasts.slice(forecastsBefore);
  for (const b of written) expect(batchProblems(b, r.settings.features.horizon), JSON.stringify(res.error)).toEqual([]);
  for (const h of store.health) expect(healthProblems(h)).toEqual([]);
  for (const s of store.scores) for (const v of [s.t, s.n, s.season]) expect(Number.isFinite(v)).toBe(true);
  if (res.ok) {
    expect(written).toHaveLength(1);
  } else {
    expect(res.error, 'a failure carries its error').toBeDefined();
    expect(DOCUMENTED_CYCLE_CODES.has(res.error!.code), `undocumented code ${res.error!.code}: ${res.error!.message}`).toBe(true);
    expect(res.error!.message.length).toBeGreaterThan(0);
    expect(written).toHaveLength(0);
  }
}

let series: ResolvedSeries;
let base: Reading[];
beforeAll(() => {
  [series] = resolved([{ name: 'oskaveld-north' }], { ...FAST_SERIES, timeZone: 'Europe/Berlin', drift: { staleAfter: '6h' } });
  const span = series.settings.windowSteps + series.maxLagSteps + series.settings.features.horizon;
  base = cleanSeries(END, span + 5);
});

type Fault =
  | { kind: 'value'; at: number; v: unknown }
  | { kind: 'duplicate'; at: number; v: number }
  | { kind: 'shuffle'; seed: number }
  | { kind: 'future'; t: number }
  | { kind: 'jump'; from: number; byMs: number }
  | { kind: 'gap'; from: number; len: number }
  | { kind: 'constant'; from: number; len: number; v: number }
  | { kind: 'badTime'; at: number; t: unknown };

const garbageValue = fc.oneof(
  fc.constantFrom<unknown>(Number.NaN, Infinity, -Infinity, 1e300, -1e300, Number.MAX_VALUE, -Number.MIN_VALUE, 0, null, undefined, '', '12.5', 'abc', true, {}, []),
  fc.double(),
);

function faultArb(n: number): fc.Arbitrary<Fault> {
  const idx = fc.nat({ max: n - 1 });
  return fc.oneof(
    fc.record({ kind: fc.constant('value' as const), at: idx, v: garbageValue }),
    fc.record({ kind: fc.constant('duplicate' as const), at: idx, v: fc.double({ min: -1e6, max: 1e6, noNaN: true }) }),
    fc.record({ kind: fc.constant('shuffle' as const), seed: fc.nat() }),
    fc.record({ kind: fc.constant('future' as const), t: fc.constantFrom(END + 3 * H, END + 365 * 24 * H, 8.64e15, Number.MAX_SAFE_INTEGER) }),
    fc.record({ kind: fc.constant('jump' as const), from: idx, byMs: fc.constantFrom(-365 * 24 * H, -7 * 24 * H, -H / 2, 90 * 60_000, 2 * H, 30 * 24 * H) }),
    fc.record({ kind: fc.constant('gap' as const), from: idx, len: fc.integer({ min: 1, max: n }) }),
    fc.record({ kind: fc.constant('constant' as const), from: idx, len: fc.integer({ min: 1, max: n }), v: fc.constantFrom(0, 1e300, -5, 400) }),
    fc.record({ kind: fc.constant('badTime' as const), at: idx, t: fc.constantFrom<unknown>(Number.NaN, Infinity, -1, 0.5, '2026-01-01', null) }),
  );
}

function apply(readings: Reading[], faults: Fault[]): Reading[] {
  let out: Array<{ t: unknown; v: unknown }> = readings.map((r) => ({ ...r }));
  for (const f of faults) {
    const n = out.length;
    if (n === 0) break;
    switch (f.kind) {
      case 'value':
        out[f.at % n].v = f.v;
        break;
      case 'duplicate':
        out.splice((f.at % n) + 1, 0, { t: out[f.at % n].t, v: f.v });
        break;
      case 'shuffle': {
        let s = f.seed;
        for (let i = n - 1; i > 0; i--) {
          s = (s * 1103515245 + 12345) % 2 ** 31;
          const j = s % (i + 1);
          [out[i], out[j]] = [out[j], out[i]];
        }
        break;
      }
      case 'future':
        out.push({ t: f.t, v: 123 });
        break;
      case 'jump':
        for (let i = f.from % n; i < n; i++) if (typeof out[i].t === 'number') out[i].t = (out[i].t as number) + f.byMs;
        break;
      case 'gap':
        out.splice(f.from % n, f.len);
        break;
      case 'constant':
        for (let i = f.from % n; i < Math.min(n, (f.from % n) + f.len); i++) out[i].v = f.v;
        break;
      case 'badTime':
        out[f.at % n].t = f.t;
        break;
    }
  }
  out = out.filter(() => true);
  return out as Reading[];
}

describe('bad readings never crash a cycle and never write a non-finite forecast', () => {
  it('random mixes of faults (property, fast-check)', async () => {
    await fc.assert(
      fc.asyncProperty(fc.array(faultArb(base.length), { minLength: 1, maxLength: 6 }), async (faults) => {
        const { store, state, cycle } = setup(series);
        store.readings.set(series.name, apply(base, faults));
        const res = await cycle.run(series, { nowMs: NOW });
        checkOutcome(res, store, series, 0);
        // A second cycle an hour later on the same (bad) data keeps the invariants too: it scores
        // the first forecast against whatever the data holds.
        const res2 = await cycle.run(series, { nowMs: NOW + H });
        checkOutcome(res2, store, series, res.ok ? 1 : 0);
        for (const st of state.pending(series.name)) expect(Number.isFinite(st.value)).toBe(true);
      }),
      { numRuns: 40, seed: 20260120, endOnFailure: true },
    );
    expect(trap.errors).toEqual([]);
  });

  const cases: Array<{ name: string; make: (b: Reading[]) => unknown[]; expect: 'ok' | string }> = [
    { name: 'NaN, ±Infinity and strings sprinkled in (dropped, short gaps filled)', make: (b) => b.map((r, i) => (i % 37 === 5 ? { ...r, v: [NaN, Infinity, -Infinity, 'abc', '12'][i % 5] } : r)), expect: 'ok' },
    { name: 'null, undefined, objects and booleans as values', make: (b) => b.map((r, i) => (i % 41 === 3 ? { ...r, v: [null, undefined, {}, true][i % 4] } : r)), expect: 'ok' },
    { name: 'rows that are not objects at all', make: (b) => [...b.slice(0, 50), null, undefined, 42, 'x', ...b.slice(50)], expect: 'ok' },
    { name: 'every timestamp twice, second copy different', make: (b) => b.flatMap((r) => [r, { t: r.t, v: r.v + 1 }]), expect: 'ok' },
    { name: 'reverse order', make: (b) => [...b].reverse(), expect: 'ok' },
    { name: 'a reading far in the future (year 275760) and at MAX_SAFE_INTEGER', make: (b) => [...b, { t: 8.64e15, v: 1 }, { t: Number.MAX_SAFE_INTEGER, v: 1 }], expect: 'ok' },
    // Squares of values beyond ±1e150 overflow: the model layer refuses them with a code.
    { name: 'huge magnitudes everywhere (1e300)', make: (b) => b.map((r) => ({ ...r, v: r.v * 1e297 })), expect: 'OUT_OF_RANGE' },
    { name: 'one reading of 1e300 in the window', make: (b) => b.map((r, i) => (i === b.length - 30 ? { ...r, v: 1e300 } : r)), expect: 'OUT_OF_RANGE' },
    { name: 'a sensor glitch at the float32 maximum (3.4e38)', make: (b) => b.map((r, i) => (i === b.length - 30 ? { ...r, v: 3.4028234663852886e38 } : r)), expect: 'ok' },
    { name: 'large but sane magnitudes (1e12 W as kW)', make: (b) => b.map((r) => ({ ...r, v: r.v * 1e9 })), expect: 'ok' },
    { name: 'constant series', make: (b) => b.map((r) => ({ ...r, v: 250 })), expect: 'ok' },
    { name: 'constant zero series', make: (b) => b.map((r) => ({ ...r, v: 0 })), expect: 'ok' },
    { name: 'all values missing (NaN)', make: (b) => b.map((r) => ({ ...r, v: NaN })), expect: 'INPUT_STALE' },
    { name: 'no readings at all', make: () => [], expect: 'INPUT_STALE' },
    { name: 'the whole window missing, only old readings', make: (b) => b.slice(0, 10), expect: 'INPUT_STALE' },
    { name: 'the newest two days missing (stale)', make: (b) => b.slice(0, -48), expect: 'INPUT_STALE' },
    { name: 'clock jumped back a year for the newest week (now stale)', make: (b) => b.map((r, i) => (i > b.length - 168 ? { ...r, t: r.t - 365 * 24 * H } : r)), expect: 'INPUT_STALE' },
    { name: 'sensor clock 90 min ahead for the last day (readings off the grid)', make: (b) => b.map((r, i) => (i > b.length - 24 ? { ...r, t: r.t + 90 * 60_000 } : r)), expect: 'ok' },
    { name: 'timestamps that are not numbers', make: (b) => b.map((r, i) => (i % 29 === 0 ? { ...r, t: ['2026-01-01', NaN, null][i % 3] } : r)), expect: 'ok' },
    { name: 'only one day of history', make: (b) => b.slice(-24), expect: 'TOO_LITTLE_HISTORY' },
  ];

  for (const c of cases) {
    it(`hand-picked: ${c.name} → ${c.expect}`, async () => {
      const { store, cycle, metrics } = setup(series);
      store.readings.set(series.name, c.make(base) as Reading[]);
      const res = await cycle.run(series, { nowMs: NOW });
      checkOutcome(res, store, series, 0);
      if (c.expect === 'ok') expect(res.error?.code ?? 'ok').toBe('ok');
      else {
        expect(res.error?.code).toBe(c.expect);
        expect(await metrics.text()).toContain(`radcast_series_failures_total{series="${series.name}",code="${c.expect}"} 1`);
      }
    });
  }
});

describe('daylight-saving transitions (Europe/Berlin)', () => {
  // EU summer time starts on the last Sunday of March at 01:00 UTC and ends on the last Sunday of
  // October at 01:00 UTC (Directive 2000/84/EC): 2026-03-29 and 2026-10-25.
  const transitions = [
    { name: 'spring forward 2026-03-29', at: Date.UTC(2026, 2, 29, 1) },
    { name: 'fall back 2026-10-25', at: Date.UTC(2026, 9, 25, 1) },
  ];
  for (const tr of transitions) {
    it(`${tr.name}: origins on each hour around the switch give valid forecasts whose target times step by exactly one hour in UTC`, async () => {
      const { store, cycle } = setup(series);
      const span = series.settings.windowSteps + series.maxLagSteps + series.settings.features.horizon;
      store.readings.set(series.name, cleanSeries(tr.at + 6 * H, span + 20, 3));
      for (let k = -3; k <= 3; k++) {
        const before = store.forecasts.length;
        const res = await cycle.run(series, { nowMs: tr.at + k * H + 5 * 60_000 });
        checkOutcome(res, store, series, before);
        expect(res.error?.code ?? 'ok').toBe('ok');
        const b = store.forecasts.at(-1)!;
        b.points.forEach((p, i) => expect(p.t - b.issuedAt).toBe((i + 1) * H));
      }
    });
  }
});

describe('garbage inside the embedded store file', () => {
  let dir: string;
  beforeAll(() => {
    dir = mkdtempSync(join(tmpdir(), 'radcast-badrows-'));
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('text, blobs and huge numbers written into the readings table by another tool are read as missing or dropped; the cycle still forecasts', async () => {
    const path = join(dir, 'store.db');
    const store = new EmbeddedStore({ path });
    store.writeReadings(series.name, base);
    await store.close();
    // Another program writes into the same file (SQLite columns are not typed).
    const raw = new Database(path);
    const upd = raw.prepare('UPDATE readings SET v = ? WHERE series = ? AND t = ?');
    const picks = [base.length - 3, base.length - 10, base.length - 50, 20];
    upd.run('not a number', series.name, base[picks[0]].t);
    upd.run(Buffer.from([1, 2, 3]), series.name, base[picks[1]].t);
    upd.run('1e999', series.name, base[picks[2]].t);
    upd.run('', series.name, base[picks[3]].t);
    raw.prepare('INSERT OR REPLACE INTO readings (series, t, v) VALUES (?, ?, ?)').run(series.name, 'yesterday', 5);
    raw.close();

    const emb = new EmbeddedStore({ path });
    try {
      const got = await emb.readReadings({ name: series.name }, END - 300 * H, END);
      expect(got.length).toBe(base.length);
      for (const r of got) expect([typeof r.t, typeof r.v]).toEqual(['number', 'number']);
      // SQLite turns the text '1e999' into a REAL on the way in (column affinity): +Infinity.
      expect(got.filter((r) => !Number.isFinite(r.v)).map((r) => r.v)).toEqual([NaN, Infinity, NaN, NaN]);
      const state = new MemoryState();
      const cap = captureLogger('warn');
      const cycle = new SeriesCycle({ store: emb, state, fitter: new InlineFitter(), logger: cap.logger });
      const res = await cycle.run(series, { nowMs: NOW });
      expect(res.error?.code ?? 'ok').toBe('ok');
      const latest = await emb.readLatestForecast(series.name);
      expect(batchProblems(latest!, series.settings.features.horizon)).toEqual([]);
    } finally {
      await emb.close();
    }
  });
});
