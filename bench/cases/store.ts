/**
 * Local store speed: what one daemon cycle writes for N series x H leads.
 *   embedded  writeForecasts (latest + history rows), writeScores, writeHealth
 *   state     recordIssued (ledger + latest issued), addResiduals (with trim), saveModels
 * Each in one transaction, on a fresh temporary file (WAL, synchronous=NORMAL).
 *
 *   npm run bench -- store [--series N] [--horizon H] [--runs R]
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { StateStore } from '../../src/store/state.ts';
import type { ForecastBatch } from '../../src/store/types.ts';
import { median, numberFlag } from '../args.ts';

const HOUR = 3_600_000;

export async function run(argv: string[]): Promise<void> {
  const nSeries = numberFlag(argv, '--series', 1000);
  const horizon = numberFlag(argv, '--horizon', 24);
  const runs = numberFlag(argv, '--runs', 3);
  const dir = mkdtempSync(join(tmpdir(), 'radcast-bench-store-'));
  const store = new EmbeddedStore({ path: join(dir, 'radcast.db') });
  const state = new StateStore({ path: join(dir, 'state.db') });
  const model = { version: 1, nFeatures: 40, nCentres: 32, nOutputs: horizon, widthMode: 'shared', linearTerms: true, centres: new Array(32 * 40).fill(0.5), gammas: new Array(32).fill(1), weights: new Array((1 + 32 + 40) * horizon).fill(0.25), seed: 1 } as const;
  const times: Record<string, number[]> = { forecasts: [], scores: [], health: [], ledger: [], residuals: [], models: [] };
  for (let r = 0; r < runs; r++) {
    const issuedAt = (r + 1) * 24 * HOUR;
    const batches: ForecastBatch[] = Array.from({ length: nSeries }, (_, i) => ({
      series: `s${i}`,
      issuedAt,
      stepMs: HOUR,
      points: Array.from({ length: horizon }, (_, l) => ({ t: issuedAt + (l + 1) * HOUR, lead: l + 1, value: 400 + l + i, bands: { '0.1': 380 + l, '0.9': 420 + l } })),
    }));
    const time = async (k: string, fn: () => unknown) => {
      const t0 = performance.now();
      await fn();
      times[k].push(performance.now() - t0);
    };
    await time('forecasts', () => store.writeForecasts(batches));
    await time('scores', () => store.writeScores(batches.flatMap((b) => Array.from({ length: horizon + 1 }, (_, lead) => ({ series: b.series, t: issuedAt, lead, mae: 1, rmse: 2, mase: 0.8, bias: 0, coverage: 0.8, n: 24, season: 24 })))));
    await time('health', () => store.writeHealth(batches.map((b) => ({ series: b.series, t: issuedAt, state: 'ok' as const, statistic: 0.5, recentMase: 0.8, baselineMase: 0.8, noveltyShare: 0, lastReadingAt: issuedAt }))));
    await time('ledger', () => state.recordIssued(batches));
    await time('residuals', () => state.transaction(() => { for (const b of batches) state.addResiduals(b.series, b.points.map((p) => ({ lead: p.lead, t: p.t, residual: 1.5 })), 500); }));
    await time('models', () => state.saveModels(batches.map((b) => ({ series: b.series, model: model as never, fittedAt: issuedAt }))));
  }
  await store.close();
  state.close();
  rmSync(dir, { recursive: true, force: true });
  console.log(`${nSeries} series x ${horizon} leads, ${runs} runs, one transaction each`);
  console.log('write                     median ms   rows');
  const rows: Record<string, number> = { forecasts: nSeries * horizon * 2, scores: nSeries * (horizon + 1), health: nSeries, ledger: nSeries * horizon, residuals: nSeries * horizon, models: nSeries };
  for (const [k, v] of Object.entries(times)) console.log(`${k.padEnd(24)} ${median(v).toFixed(1).padStart(10)} ${String(rows[k]).padStart(7)}`);
}
