import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { StateStore, ALL_SERIES } from '../../../src/store/state.ts';
import { EmbeddedStore } from '../../../src/store/embedded.ts';
import type { ForecastBatch } from '../../../src/store/types.ts';
import type { RbfModel } from '../../../src/model/types.ts';

const H = 3_600_000;
let dir: string;
let state: StateStore;
beforeEach(() => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-state-'));
  state = new StateStore({ path: join(dir, 'state.db') });
});
afterEach(() => {
  state.close();
  rmSync(dir, { recursive: true, force: true });
});

const batch = (series: string, issuedAt: number, horizon = 3): ForecastBatch => ({
  series,
  issuedAt,
  stepMs: H,
  points: Array.from({ length: horizon }, (_, l) => ({ t: issuedAt + (l + 1) * H, lead: l + 1, value: 10 * issuedAt / H + l, bands: { '0.1': l - 1, '0.9': l + 1 } })),
});

const model: RbfModel = { version: 1, nFeatures: 2, nCentres: 1, nOutputs: 1, widthMode: 'shared', linearTerms: false, centres: [0.1, -0.2], gammas: [0.5], weights: [1.25, -3.5], seed: 1, meta: { windowSteps: 100 } };

describe('state store', () => {
  it('models round-trip exactly as JSON (warm start) and are replaced', () => {
    expect(state.loadModel('a')).toBeNull();
    state.saveModel('a', model, 1000);
    expect(state.loadModel('a')).toEqual({ model, fittedAt: 1000 });
    state.saveModels([{ series: 'a', model: { ...model, seed: 2 }, fittedAt: 2000 }, { series: 'b', model, fittedAt: 2000 }]);
    expect(state.loadModel('a')?.model.seed).toBe(2);
    expect(state.loadModel('b')?.fittedAt).toBe(2000);
  });

  it('models given as bytes are kept as a BLOB, returned as stored, and need a decoder to parse', () => {
    const bytes = Uint8Array.from([0x52, 0x43, 0x46, 0x50, 0, 1, 2, 254, 255]);
    state.saveModel('p', bytes, 3000);
    const row = state.db.prepare("SELECT typeof(model) AS kind, length(model) AS n FROM models WHERE series = 'p'").get() as { kind: string; n: number };
    expect(row).toEqual({ kind: 'blob', n: bytes.length });
    const back = state.loadModelStored('p');
    expect(back?.fittedAt).toBe(3000);
    expect(back?.stored).toBeInstanceOf(Uint8Array);
    expect(Array.from(back!.stored as Uint8Array)).toEqual(Array.from(bytes));
    expect(() => state.loadModel('p')).toThrow(expect.objectContaining({ code: 'STORE_PROTOCOL', series: 'p' }));
    expect(state.loadModel('p', (b) => b.length)?.model).toBe(bytes.length);
    // A view into a larger buffer stores only its own bytes.
    const big = new Uint8Array(32).map((_, i) => i);
    state.saveModels([{ series: 'q', model: big.subarray(4, 8), fittedAt: 1 }]);
    expect(Array.from(state.loadModelStored('q')!.stored as Uint8Array)).toEqual([4, 5, 6, 7]);
    // JSON models (older files, other callers) are text, as before.
    state.saveModel('p', model, 4000);
    expect(typeof state.loadModelStored('p')?.stored).toBe('string');
    expect(state.loadModel('p')).toEqual({ model, fittedAt: 4000 });
  });

  it('kv holds bytes beside JSON values; reading bytes as JSON is a coded error', () => {
    state.setBytes('b', Uint8Array.from([1, 2, 3]), 5);
    state.setJson('j', { a: 1 }, 5);
    expect(Array.from(state.getStored('b') as Uint8Array)).toEqual([1, 2, 3]);
    expect(state.getStored('j')).toBe('{"a":1}');
    expect(state.getStored('none')).toBeUndefined();
    expect(() => state.getJson('b')).toThrow(expect.objectContaining({ code: 'STORE_PROTOCOL', at: 'b' }));
    expect(state.getJson('j')).toEqual({ a: 1 });
  });

  it('the issued-forecast ledger yields matured steps once, idempotently', () => {
    state.recordIssued([batch('a', 0), batch('a', H)]);
    state.recordIssued([batch('a', 0)]); // again: no duplicates
    expect(state.issuedCount('a')).toBe(6);
    const m = state.matured('a', 2 * H);
    // issued at 0: targets H, 2H; issued at H: target 2H
    expect(m.map((e) => [e.issuedAt, e.lead, e.t])).toEqual([[0, 1, H], [H, 1, 2 * H], [0, 2, 2 * H]]); // oldest target first, then lead
    expect(m[0].bands).toEqual({ '0.1': -1, '0.9': 1 });
    state.removeIssued(m);
    expect(state.matured('a', 2 * H)).toEqual([]);
    expect(state.issuedCount('a')).toBe(3);
    expect(state.pruneIssued('a', 4 * H)).toBe(2);
  });

  it('keeps the newest issued batch per series as latestIssued', () => {
    state.recordIssued([batch('a', H)]);
    state.recordIssued([batch('a', 0)]); // older one arriving late does not replace it
    expect(state.latestIssued('a')?.issuedAt).toBe(H);
    expect(state.latestIssued('zzz')).toBeNull();
  });

  it('residuals per lead keep only the newest N when asked', () => {
    const rows = Array.from({ length: 30 }, (_, i) => ({ lead: 1 + (i % 3), t: i * H, residual: i - 15 }));
    state.addResiduals('a', [...rows, { lead: 1, t: 99 * H, residual: NaN }], 4);
    const all = state.residuals('a');
    expect([...all.keys()]).toEqual([1, 2, 3]);
    for (const [lead, list] of all) {
      expect(list).toHaveLength(4);
      expect(list.every((r) => r.lead === lead)).toBe(true);
      expect(list.map((r) => r.t)).toEqual([...list.map((r) => r.t)].sort((x, y) => x - y));
    }
    expect(all.get(1)!.map((r) => r.residual)).toEqual([3, 6, 9, 12]); // i = 18, 21, 24, 27
    expect(state.residuals('a', 2).get(3)!.map((r) => r.t)).toEqual([26 * H, 29 * H]);
  });

  it('drift detector state and small JSON values round-trip', () => {
    state.saveDriftState('a', { ph: { m: 1.5, min: -2 }, state: 'watch', since: 5 }, 10);
    expect(state.loadDriftState('a')).toEqual({ state: { ph: { m: 1.5, min: -2 }, state: 'watch', since: 5 }, updatedAt: 10 });
    state.setJson('baseline:a', { mase: 0.8 }, 1);
    expect(state.getJson('baseline:a')).toEqual({ mase: 0.8 });
    state.deleteJson('baseline:a');
    expect(state.getJson('baseline:a')).toBeUndefined();
  });

  it('the webhook outbox keeps a notification until delivered, also across a reopen', () => {
    const id = state.enqueue('a', 'drift', { from: 'ok', to: 'alert' }, 100);
    state.enqueue('b', 'drift', { from: 'ok', to: 'watch' }, 101);
    state.markFailed(id, 'ECONNREFUSED', 500);
    expect(state.dueNotifications(200).map((e) => e.series)).toEqual(['b']);
    state.close();
    state = new StateStore({ path: join(dir, 'state.db') });
    const due = state.dueNotifications(600);
    expect(due.map((e) => [e.series, e.attempts, e.lastError])).toEqual([['a', 1, 'ECONNREFUSED'], ['b', 0, null]]);
    expect(due[0].payload).toEqual({ from: 'ok', to: 'alert' });
    state.markDelivered(id);
    expect(state.pendingNotifications().map((e) => e.series)).toEqual(['b']);
    expect(state.outboxSize()).toBe(1);
  });

  it('cycle bookkeeping: attempts, successes, failures and the last whole cycle', () => {
    state.recordAttempt('a', 10);
    state.recordFailure('a', 11, 'GAP_TOO_LONG');
    expect(state.cycle('a')).toEqual({ series: 'a', lastAttemptAt: 11, lastSuccessAt: null, lastErrorCode: 'GAP_TOO_LONG' });
    state.recordSuccess('a', 20);
    expect(state.cycle('a')).toEqual({ series: 'a', lastAttemptAt: 20, lastSuccessAt: 20, lastErrorCode: null });
    expect(state.lastSuccessfulCycleAt()).toBeNull();
    state.recordSuccess(ALL_SERIES, 30);
    expect(state.lastSuccessfulCycleAt()).toBe(30);
  });

  it('transaction() groups calls: a throw rolls all of them back', () => {
    expect(() =>
      state.transaction(() => {
        state.saveModel('a', model, 1);
        state.recordIssued([batch('a', 0)]);
        throw new Error('stop');
      }),
    ).toThrow('stop');
    expect(state.loadModel('a')).toBeNull();
    expect(state.issuedCount('a')).toBe(0);
  });

  it('can share one file with the embedded store', async () => {
    const shared = join(dir, 'shared.db');
    const e = new EmbeddedStore({ path: shared });
    const s = new StateStore({ path: shared });
    e.writeReadings('a', [{ t: 0, v: 1 }]);
    s.recordIssued([batch('a', 0)]);
    await e.writeForecast(batch('a', 0));
    expect(s.issuedCount('a')).toBe(3);
    expect((await e.readLatestForecast('a'))?.points).toHaveLength(3);
    s.close();
    await e.close();
  });

  it('a whole cycle of 1000 series x 24 points goes in one transaction', () => {
    const batches = Array.from({ length: 1000 }, (_, i) => batch(`s${i}`, 0, 24));
    state.transaction(() => {
      state.recordIssued(batches);
      state.saveModels(batches.map((b) => ({ series: b.series, model, fittedAt: 1 })));
    });
    expect((state.db.prepare('SELECT count(*) AS n FROM ledger').get() as { n: number }).n).toBe(24_000);
    expect(state.loadModel('s999')?.model).toEqual(model);
  });
});
