/**
 * InfluxDB adapter speed against a real influxd 1.x on loopback (v1 mode) and VictoriaMetrics
 * (v2 write path): forecast write throughput through the adapter's buffer, and read time of a
 * raw year of hourly readings and of a week of 10-second readings averaged per hour by the server.
 *
 *   npm run bench -- influx [--quick]
 */
import { startInflux1, startVictoria } from '../../tests/helpers/servers.ts';
import { createInfluxStore, type InfluxStore } from '../../src/store/influx/index.ts';
import type { ForecastBatch } from '../../src/store/types.ts';
import { median } from '../args.ts';

const H = 3_600_000;

function batches(nSeries: number, issuedAt: number): ForecastBatch[] {
  return Array.from({ length: nSeries }, (_, k) => ({
    series: `substation-${String(k).padStart(4, '0')}`,
    issuedAt,
    stepMs: H,
    points: Array.from({ length: 24 }, (_, i) => ({ t: issuedAt + (i + 1) * H, lead: i + 1, value: 500 + k + i, bands: { '0.1': 480 + k + i, '0.9': 520 + k + i } })),
  }));
}

async function writeRun(store: InfluxStore, list: ForecastBatch[]): Promise<number> {
  const t0 = performance.now();
  for (const b of list) await store.writeForecast(b);
  await store.flush();
  return performance.now() - t0;
}

export async function run(argv: string[]): Promise<void> {
  const quick = argv.includes('--quick');
  const runs = quick ? 3 : 5;
  const nSeries = quick ? 200 : 1_000;
  const rows: string[][] = [];
  const issued = Math.floor(Date.now() / H) * H - 24 * H;

  const influx = await startInflux1();
  try {
    await influx.query('CREATE DATABASE bench');
    const store = createInfluxStore({ api: 'v1', url: influx.url, database: 'bench', writeBufferPoints: 1_000_000 });
    const times: number[] = [];
    for (let r = 0; r < runs; r++) times.push(await writeRun(store, batches(nSeries, issued + r * H)));
    const lines = nSeries * 48;
    rows.push(['v1 write (influxd)', `${nSeries} series x 24 steps = ${lines} points`, `${median(times).toFixed(0)} ms`, `${Math.round(lines / (median(times) / 1000))} points/s`]);

    const start = Date.UTC(2025, 0, 1);
    const year: string[] = [];
    for (let k = 0; k < 8_760; k++) year.push(`heat,substation=oskaveld-north load_kw=${500 + (k % 24)} ${start + k * H}`);
    for (let i = 0; i < year.length; i += 5_000) await influx.writeLines('bench', year.slice(i, i + 5_000));
    const readYear: number[] = [];
    for (let r = 0; r < runs; r++) {
      const t0 = performance.now();
      const got = await store.readReadings({ name: 'oskaveld-north', measurement: 'heat', field: 'load_kw', tags: { substation: 'oskaveld-north' } }, start, start + 8_760 * H);
      readYear.push(performance.now() - t0);
      if (got.length !== 8_760) throw new Error(`read ${got.length} readings`);
    }
    rows.push(['v1 read raw', '8760 hourly readings', `${median(readYear).toFixed(0)} ms`, `${Math.round(8_760 / (median(readYear) / 1000))} readings/s`]);

    const fine: string[] = [];
    const n10s = 7 * 8_640;
    for (let k = 0; k < n10s; k++) fine.push(`meter,substation=brennick-yard load_kw=${300 + (k % 360) / 10} ${start + k * 10_000}`);
    for (let i = 0; i < fine.length; i += 10_000) await influx.writeLines('bench', fine.slice(i, i + 10_000));
    const readAgg: number[] = [];
    for (let r = 0; r < runs; r++) {
      const t0 = performance.now();
      const got = await store.readReadings({ name: 'brennick-yard', measurement: 'meter', field: 'load_kw', aggregateMs: H }, start, start + 7 * 86_400_000);
      readAgg.push(performance.now() - t0);
      if (got.length !== 168) throw new Error(`aggregated read gave ${got.length} buckets`);
    }
    rows.push(['v1 read, mean per hour on the server', `${n10s} 10-second readings -> 168`, `${median(readAgg).toFixed(0)} ms`, '']);
    await store.close();
  } finally {
    await influx.close();
  }

  const vm = await startVictoria();
  try {
    const store = createInfluxStore({ api: 'v2', url: vm.url, org: 'bench', bucket: 'bench', token: 'unused', writeBufferPoints: 1_000_000 });
    const times: number[] = [];
    for (let r = 0; r < runs; r++) times.push(await writeRun(store, batches(nSeries, issued + r * H)));
    const lines = nSeries * 48;
    rows.push(['v2 write (VictoriaMetrics)', `${nSeries} series x 24 steps = ${lines} points`, `${median(times).toFixed(0)} ms`, `${Math.round(lines / (median(times) / 1000))} points/s`]);
    await store.close();
  } finally {
    await vm.close();
  }

  const header = ['case', 'size', `median of ${runs}`, 'rate'];
  const widths = header.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i]!.length)));
  const line = (r: string[]) => r.map((c, i) => c.padEnd(widths[i]!)).join('  ');
  console.log(line(header));
  for (const r of rows) console.log(line(r));
}
