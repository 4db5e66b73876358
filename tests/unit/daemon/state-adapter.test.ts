import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import fc from 'fast-check';
import { StateStore } from '../../../src/store/state.ts';
import { StateAdapter, applyAdditions, decodePool, encodePool, packAdditions, packPool, unpackAdditions, unpackPool } from '../../../src/daemon/state-adapter.ts';
import { addResiduals, createResidualPool, originPhase } from '../../../src/evaluate/bands.ts';
import { captureLogger } from './helpers.ts';
import { resolved, syntheticLoad } from './fakes.ts';
import { fitAt, forecastAt } from '../../../src/forecast/engine.ts';
import { lastValueIndex, regularize } from '../../../src/series/index.ts';

const END = Date.UTC(2026, 10, 30);
const [S] = resolved([{ name: 'oskaveld-north' }]);

const HOUR = 3600_000;
let dir = '';
let store: StateStore;
beforeEach(() => {
  dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-state-'));
  store = new StateStore({ path: path.join(dir, 'state.db') });
});
afterEach(() => {
  store.close();
  rmSync(dir, { recursive: true, force: true });
});

describe('residual pool storage', () => {
  it('encode/decode is exact for any residuals and phases (property)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 6 }),
        fc.integer({ min: 1, max: 300 }),
        fc.array(fc.tuple(fc.integer({ min: 1, max: 6 }), fc.double({ noNaN: true, noDefaultInfinity: true }), fc.nat(299)), { maxLength: 200 }),
        (H, phases, entries) => {
          const pool = createResidualPool(H, 50, phases);
          for (const [lead, v, ph] of entries) if (lead <= H) addResiduals(pool, lead, [v], ph % phases);
          const back = decodePool(JSON.parse(JSON.stringify(encodePool(pool))));
          expect(back).toEqual(pool);
        },
      ),
    );
  });

  it('pack/unpack is exact for any residuals and phases, runs of consecutive phases or not (property)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 6 }),
        fc.integer({ min: 1, max: 300 }),
        fc.array(fc.tuple(fc.integer({ min: 1, max: 6 }), fc.double({ noNaN: true, noDefaultInfinity: true }), fc.nat(299), fc.integer({ min: 1, max: 40 })), { maxLength: 60 }),
        fc.nat(1000),
        (H, phases, entries, dropped) => {
          const pool = createResidualPool(H, 50, phases);
          // Each entry is a run of forecasts issued at consecutive steps (phase, phase + 1, ...).
          for (const [lead, v, ph, len] of entries) {
            for (let i = 0; i < len; i++) if (lead <= H) addResiduals(pool, lead, [v + i], (ph + i) % phases);
          }
          pool.dropped += dropped;
          const back = unpackPool(packPool(pool));
          expect(back).toEqual(pool);
          back!.byLead.forEach((l, h) => l.forEach((v, i) => expect(Object.is(v, pool.byLead[h][i])).toBe(true)));
        },
      ),
      { numRuns: 150 },
    );
  });

  it('a full pool of hourly residuals packs to 8 bytes per residual plus a little', () => {
    const H = 24;
    const pool = createResidualPool(H, 336, 24);
    for (let o = 0; o < 400; o++) for (let lead = 1; lead <= H; lead++) addResiduals(pool, lead, [Math.sin(o * lead)], originPhase(o * HOUR, HOUR, 24));
    const bytes = packPool(pool);
    expect(bytes.length).toBeLessThan(24 * 336 * 8 + 1024);
    expect(unpackPool(bytes)).toEqual(pool);
  });

  it('damaged packed pools are refused (null), never half read', () => {
    const pool = createResidualPool(3, 10, 24);
    for (let i = 0; i < 12; i++) addResiduals(pool, 1 + (i % 3), [i * 0.5], i % 24);
    const bytes = packPool(pool);
    expect(unpackPool(bytes.subarray(0, bytes.length - 1))).toBeNull();
    expect(unpackPool(new Uint8Array(8))).toBeNull();
    const badMagic = bytes.slice();
    badMagic[0] ^= 0xff;
    expect(unpackPool(badMagic)).toBeNull();
    const badCount = bytes.slice();
    new DataView(badCount.buffer).setUint32(32, 999, true);
    expect(unpackPool(badCount)).toBeNull();
  });

  it('the adapter writes the pool as a BLOB and still reads the JSON pools of older state files', async () => {
    const { logger, problems } = captureLogger();
    const a = new StateAdapter(store, logger);
    const pool = createResidualPool(2, 10, 24);
    addResiduals(pool, 1, [1.5, -0.25], 7);
    addResiduals(pool, 2, [3], 8);
    store.setJson('residual-pool:old', encodePool(pool), 0); // as written before pools were packed
    expect(await a.getResidualPool('old', { horizon: 2, phases: 24, capacityPerLead: 10 })).toEqual(pool);
    await a.putResidualPool('new', pool);
    const kind = store.db.prepare("SELECT typeof(value) AS kind FROM kv WHERE key = 'residual-pool:new'").get() as { kind: string };
    expect(kind.kind).toBe('blob');
    expect(await a.getResidualPool('new', { horizon: 2, phases: 24, capacityPerLead: 10 })).toEqual(pool);
    // A smaller capacity keeps the newest residuals.
    const cut = await a.getResidualPool('new', { horizon: 2, phases: 24, capacityPerLead: 1 });
    expect(cut.byLead).toEqual([[-0.25], [3]]);
    store.setBytes('residual-pool:bad', Uint8Array.from([1, 2, 3]), 0);
    expect((await a.getResidualPool('bad', { horizon: 2, phases: 24, capacityPerLead: 10 })).byLead).toEqual([[], []]);
    expect(problems().filter((l) => l.code === 'STATE_POOL_UNREADABLE')).toHaveLength(1);
  });

  it('applying additions in one go equals addResiduals one by one (property)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 4 }),
        fc.integer({ min: 1, max: 30 }),
        fc.integer({ min: 1, max: 12 }),
        fc.array(fc.tuple(fc.integer({ min: 1, max: 4 }), fc.double({ noNaN: true, noDefaultInfinity: true }), fc.nat(29)), { maxLength: 40 }),
        fc.array(fc.tuple(fc.integer({ min: 1, max: 4 }), fc.double({ noNaN: true, noDefaultInfinity: true }), fc.nat(29)), { maxLength: 80 }),
        (H, phases, capacity, first, then) => {
          const a = createResidualPool(H, capacity, phases);
          for (const [lead, v, ph] of first) if (lead <= H) addResiduals(a, lead, [v], ph % phases);
          const b = unpackPool(packPool(a))!;
          const added = then.filter(([lead]) => lead <= H).map(([lead, residual, ph]) => ({ lead, residual, phase: ph % phases }));
          for (const x of added) addResiduals(a, x.lead, [x.residual], x.phase);
          expect(applyAdditions(b, unpackAdditions(packAdditions(added.slice(5), packAdditions(added.slice(0, 5))))!)).toBe(true);
          expect(b).toEqual(a);
        },
      ),
      { numRuns: 200 },
    );
    expect(applyAdditions(createResidualPool(2, 5, 24), [{ lead: 3, residual: 1, phase: 0 }])).toBe(false);
  });

  it('each cycle appends only its new residuals; the pool read back is the pool kept in memory, across rewrites', async () => {
    const { logger, problems } = captureLogger();
    const shape = { horizon: 3, phases: 24, capacityPerLead: 20 };
    let a = new StateAdapter(store, logger);
    const mirror = createResidualPool(3, 20, 24);
    for (let i = 0; i < 15; i++) addResiduals(mirror, 1 + (i % 3), [Math.cos(i)], i % 24);
    await a.putResidualPool('north', structuredClone(mirror)); // seeded: written whole
    const sizes: number[] = [];
    let rewrites = 0;
    for (let cycle = 0; cycle < 40; cycle++) {
      if (cycle % 13 === 7) a = new StateAdapter(store, logger); // a restart in between
      const pool = await a.getResidualPool('north', shape);
      expect(pool).toEqual(mirror);
      const added = [1, 2, 3].map((lead) => ({ lead, residual: Math.sin(cycle * 7 + lead) * 100, phase: (cycle + 20 - lead) % 24 }));
      for (const x of added) {
        addResiduals(pool, x.lead, [x.residual], x.phase);
        addResiduals(mirror, x.lead, [x.residual], x.phase);
      }
      const basePrev = store.getStored('residual-pool:north');
      await a.putResidualPool('north', pool, added);
      if (store.getStored('residual-pool:north') !== undefined && !Buffer.from(store.getStored('residual-pool:north') as Uint8Array).equals(Buffer.from(basePrev as Uint8Array))) rewrites++;
      sizes.push((store.getStored('residual-pool-added:north') as Uint8Array | undefined)?.length ?? 0);
    }
    expect(await new StateAdapter(store, logger).getResidualPool('north', shape)).toEqual(mirror);
    expect(mirror.dropped).toBeGreaterThan(0); // the leads filled up: drops replayed too
    // Mostly appends of 3 x 12 bytes, and a whole rewrite (which clears the additions) now and then.
    expect(rewrites).toBeGreaterThan(1);
    expect(rewrites).toBeLessThan(20);
    expect(sizes.filter((n) => n === 0).length).toBe(rewrites);
    expect(Math.max(...sizes)).toBeLessThanOrEqual(12 + 12 * 12);
    expect(problems()).toHaveLength(0);
  });

  it('unreadable additions are left out with a warning and the next write is the whole pool', async () => {
    const { logger, problems } = captureLogger();
    const a = new StateAdapter(store, logger);
    const shape = { horizon: 2, phases: 1, capacityPerLead: 10 };
    const pool = createResidualPool(2, 10, 1);
    addResiduals(pool, 1, [1, 2], 0);
    await a.putResidualPool('s', pool);
    store.setBytes('residual-pool-added:s', Uint8Array.from([9, 9, 9]), 0);
    const back = await a.getResidualPool('s', shape);
    expect(back).toEqual(pool);
    expect(problems().map((l) => l.code)).toEqual(['STATE_POOL_UNREADABLE']);
    addResiduals(back, 2, [5], 0);
    await a.putResidualPool('s', back, [{ lead: 2, residual: 5, phase: 0 }]);
    expect(store.getStored('residual-pool-added:s')).toBeUndefined();
    expect(await a.getResidualPool('s', shape)).toEqual(back);
  });

  it('a damaged stored pool reads as empty (with a warning), not as an error', async () => {
    const { logger, lines } = captureLogger();
    const a = new StateAdapter(store, logger);
    store.setJson('residual-pool:x', { v: 1, horizon: 2, phases: 1, capacityPerLead: 5, dropped: 0, counts: [1, 1], values: 'AAAA', phase: '' }, 0);
    const pool = await a.getResidualPool('x', { horizon: 2, phases: 1, capacityPerLead: 5 });
    expect(pool.byLead).toEqual([[], []]);
    expect(lines.some((l) => l.code === 'STATE_POOL_UNREADABLE')).toBe(true);
  });

  it('a state file with residual rows (no pool yet) is read into a pool with the phases of the rows', async () => {
    const { logger } = captureLogger();
    const a = new StateAdapter(store, logger, { stepOf: () => HOUR });
    // Rows of lead 1 and 2 issued at 05:00 and 06:00 UTC.
    store.addResiduals('s', [
      { lead: 1, t: 6 * HOUR, residual: 1.5 },
      { lead: 2, t: 7 * HOUR, residual: -2 },
      { lead: 1, t: 7 * HOUR, residual: 0.25 },
    ]);
    const pool = await a.getResidualPool('s', { horizon: 2, phases: 24, capacityPerLead: 10 });
    expect(pool.byLead).toEqual([[1.5, 0.25], [-2]]);
    expect(pool.phaseByLead).toEqual([[originPhase(5 * HOUR, HOUR, 24), originPhase(6 * HOUR, HOUR, 24)], [5]]);
    // Saved once, the pool is what is read from then on.
    addResiduals(pool, 2, [4], 9);
    await a.putResidualPool('s', pool);
    const again = await a.getResidualPool('s', { horizon: 2, phases: 24, capacityPerLead: 10 });
    expect(again).toEqual(pool);
    // A changed horizon does not line up with old residuals: empty.
    expect((await a.getResidualPool('s', { horizon: 3, phases: 24, capacityPerLead: 10 })).byLead).toEqual([[], [], []]);
  });
});

describe('warm-start model storage', () => {
  const fitted = () => {
    const target = regularize(syntheticLoad({ fromMs: END - 40 * 24 * HOUR, toMs: END }), { ...S.settings.regularize, stepMs: HOUR, startMs: END - 30 * 24 * HOUR, endMs: END, series: S.name });
    return { target, f: fitAt(target, {}, S.settings, lastValueIndex(target)) };
  };

  it('stores the packed forecaster as it came from the fit, and reads older JSON rows', async () => {
    const { logger, problems } = captureLogger();
    const a = new StateAdapter(store, logger);
    const { target, f } = fitted();
    await a.putModel(S.name, f, 1);
    const stored = await a.getStoredModel(S.name);
    expect(stored).toBeInstanceOf(Uint8Array);
    const back = (await a.getModel(S.name))!;
    const o = lastValueIndex(target);
    expect(Buffer.from(forecastAt(back, target, {}, S.settings, o).values.buffer).equals(Buffer.from(forecastAt(f, target, {}, S.settings, o).values.buffer))).toBe(true);
    // A state file written before models were packed holds the forecaster as JSON text.
    store.saveModel('old', f, 1);
    expect(typeof (await a.getStoredModel('old'))).toBe('string');
    expect(await a.getModel('old')).toEqual(f);
    expect(problems()).toHaveLength(0);
  });

  it('a damaged stored model reads as none, with a warning naming the series', async () => {
    const { logger, problems } = captureLogger();
    const a = new StateAdapter(store, logger);
    store.saveModel('tarrow-hill', Uint8Array.from([0x52, 0x43, 0x46, 0x50, 1, 0, 0, 0]), 1);
    expect(await a.getModel('tarrow-hill')).toBeNull();
    expect(problems()).toEqual([expect.objectContaining({ series: 'tarrow-hill', code: 'BAD_FITTED' })]);
  });
});
