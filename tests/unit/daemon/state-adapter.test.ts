import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import fc from 'fast-check';
import { StateStore } from '../../../src/store/state.ts';
import { StateAdapter, decodePool, encodePool } from '../../../src/daemon/state-adapter.ts';
import { addResiduals, createResidualPool, originPhase } from '../../../src/evaluate/bands.ts';
import { captureLogger } from './helpers.ts';

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
