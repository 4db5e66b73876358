/**
 * The InfluxDB adapter's write spool (a table in the state file) during an outage of N series x
 * H leads per cycle, with the real line protocol the adapter writes:
 *   put       each series' writes of one cycle as the cycle makes them (one transaction per write
 *             call: forecast, scores, health), the way points go to the spool while the server fails
 *   drain     what a recovery does: oldest batchSize points, then remove them, until empty
 *   size      bytes of the state file per spooled point (after a checkpoint)
 *
 *   npm run bench -- spool [--series N] [--horizon H] [--cycles C] [--batch B]
 */
import { mkdtempSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import Database from 'better-sqlite3';
import { SqliteSpool } from '../../src/store/spool.ts';
import { forecastLines, healthLines, scoreLines } from '../../src/store/influx/schema.ts';
import { INFLUX_DEFAULTS } from '../../src/store/influx/options.ts';
import type { SpooledLine } from '../../src/store/influx/spool.ts';
import { median, numberFlag } from '../args.ts';

const HOUR = 3_600_000;

export async function run(argv: string[]): Promise<void> {
  const nSeries = numberFlag(argv, '--series', 1000);
  const horizon = numberFlag(argv, '--horizon', 24);
  const cycles = numberFlag(argv, '--cycles', 3);
  const batchSize = numberFlag(argv, '--batch', INFLUX_DEFAULTS.batchSize);
  const dir = mkdtempSync(join(tmpdir(), 'radcast-bench-spool-'));
  const path = join(dir, 'state.db');
  const spool = new SqliteSpool({ path, target: 'influxdb-v1 http://127.0.0.1:8086 db=bench rp=' });
  const m = INFLUX_DEFAULTS.measurements;
  let seq = 0;
  const putMs: number[] = [];
  let points = 0;
  for (let c = 0; c < cycles; c++) {
    const issuedAt = (1_000 + c) * HOUR;
    // Lines are built first: only the spool is timed.
    const calls: SpooledLine[][] = [];
    for (let i = 0; i < nSeries; i++) {
      const series = `oskaveld-sub-${i}`;
      const batch = { series, issuedAt, stepMs: HOUR, points: Array.from({ length: horizon }, (_, l) => ({ t: issuedAt + (l + 1) * HOUR, lead: l + 1, value: 400 + l + i / 7, bands: { '0.1': 380 + l, '0.9': 420 + l } })) };
      for (const lines of [
        forecastLines(batch, m),
        scoreLines(Array.from({ length: horizon + 1 }, (_, lead) => ({ series, t: issuedAt, lead, mae: 1.5, rmse: 2.25, mase: 0.82, bias: -0.1, coverage: 0.8, n: 24, season: 24 })), m),
        healthLines([{ series, t: issuedAt, state: 'ok', statistic: 0.5, recentMase: 0.8, baselineMase: 0.85, noveltyShare: 0.02, lastReadingAt: issuedAt }], m),
      ]) {
        calls.push(lines.map((l) => ({ ...l, seq: ++seq })));
      }
    }
    const t0 = performance.now();
    for (const rows of calls) points += spool.put(rows);
    putMs.push(performance.now() - t0);
  }
  const kept = spool.count();
  spool.close();
  const cp = new Database(path);
  cp.pragma('wal_checkpoint(TRUNCATE)');
  cp.close();
  const bytes = statSync(path).size;

  const again = new SqliteSpool({ path, target: 'influxdb-v1 http://127.0.0.1:8086 db=bench rp=' });
  const t1 = performance.now();
  let drained = 0;
  for (;;) {
    const b = again.oldest(batchSize);
    if (b.length === 0) break;
    drained += again.remove(b);
  }
  const drainMs = performance.now() - t1;
  again.close();
  rmSync(dir, { recursive: true, force: true });

  const perCycle = kept / cycles;
  console.log(`series ${nSeries}, horizon ${horizon}, cycles ${cycles}: ${kept} points spooled (${Math.round(perCycle)} per cycle), batch ${batchSize}`);
  console.log('| step | median per cycle (ms) | per point (µs) |');
  console.log('|---|---:|---:|');
  console.log(`| put (one transaction per write call) | ${median(putMs).toFixed(0)} | ${((median(putMs) * 1000) / perCycle).toFixed(2)} |`);
  console.log(`| drain (read oldest + remove, all ${drained}) | ${(drainMs / cycles).toFixed(0)} | ${((drainMs * 1000) / drained).toFixed(2)} |`);
  console.log(`state file: ${(bytes / 2 ** 20).toFixed(1)} MiB for ${kept} points = ${(bytes / kept).toFixed(0)} bytes per point (${((bytes / kept) * 2e6 / 2 ** 30).toFixed(2)} GiB at spoolMaxPoints ${INFLUX_DEFAULTS.spoolMaxPoints})`);
  if (points !== kept) console.log(`(note: put counted ${points} rows, the file holds ${kept})`);
}
