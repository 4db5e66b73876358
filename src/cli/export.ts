/**
 * `radcast export --series NAME [--config FILE | --db FILE]`: forecasts of one series as CSV.
 * Default: the latest forecast. --history: every issued point (optionally one lead, a target
 * time range). Band columns are named like the InfluxDB fields: quantile 0.1 -> q10.
 */
import { writeFileSync } from 'node:fs';
import { resolve } from 'node:path';
import type { Command } from 'commander';
import { EmbeddedStore, type HistoryPoint } from '../store/embedded.ts';
import { csvField, parseTimestamp } from './csv.ts';
import { defaultContext, EXIT, type CliContext } from './context.ts';
import { embeddedPathFor } from './import.ts';

/** 0.1 -> q10, 0.025 -> q2_5 (same names as the InfluxDB output fields). */
export function bandColumn(key: string): string {
  const q = Number(key);
  if (!Number.isFinite(q) || q <= 0 || q >= 1) return `q_${key}`;
  return 'q' + String(Math.round(q * 100 * 1e6) / 1e6).replace('.', '_');
}

export function forecastCsv(series: string, points: HistoryPoint[], timeFormat: 'iso' | 'ms'): string {
  const keys = [...new Set(points.flatMap((p) => Object.keys(p.bands)))].sort((a, b) => Number(a) - Number(b));
  const time = (ms: number) => (timeFormat === 'ms' ? String(ms) : new Date(ms).toISOString());
  const lines = [['series', 'issued_at', 'lead', 'target_time', 'value', ...keys.map(bandColumn)].join(',')];
  for (const p of points) {
    lines.push([csvField(series), time(p.issuedAt), String(p.lead), time(p.t), csvField(p.value), ...keys.map((k) => (k in p.bands ? csvField(p.bands[k]) : ''))].join(','));
  }
  return lines.join('\n') + '\n';
}

export function registerExport(program: Command, ctx: CliContext = defaultContext()): void {
  program
    .command('export')
    .description('write forecasts of one series from the embedded store as CSV')
    .requiredOption('-s, --series <name>', 'series to export (its output name)')
    .option('-c, --config <file>', 'config file whose embedded store is read')
    .option('--db <file>', 'embedded store file (instead of --config)')
    .option('--history', 'every issued forecast point instead of only the latest forecast')
    .option('--lead <steps>', 'with --history: only this lead time (steps)')
    .option('--from <time>', 'with --history: target times from (ISO-8601 with offset or epoch)')
    .option('--to <time>', 'with --history: target times before')
    .option('--time-format <fmt>', 'iso (UTC) or ms (epoch milliseconds)', 'iso')
    .option('-o, --out <file>', 'write to a file instead of stdout')
    .action(async (opts: { series: string; config?: string; db?: string; history?: boolean; lead?: string; from?: string; to?: string; timeFormat: string; out?: string }) => {
      const bad = (msg: string) => {
        ctx.io.err(`USAGE: ${msg}\n`);
        ctx.fail(EXIT.INVALID);
      };
      if (opts.timeFormat !== 'iso' && opts.timeFormat !== 'ms') return bad('--time-format must be iso or ms');
      const lead = opts.lead === undefined ? undefined : Number(opts.lead);
      if (lead !== undefined && !(Number.isInteger(lead) && lead >= 1)) return bad('--lead must be a whole number >= 1');
      const range: { fromMs?: number; toMs?: number } = {};
      for (const [k, v] of [['fromMs', opts.from], ['toMs', opts.to]] as const) {
        if (v === undefined) continue;
        const t = parseTimestamp(v);
        if (!t.ok) return bad(`${k === 'fromMs' ? '--from' : '--to'}: ${t.message} (${t.hint})`);
        range[k] = t.ms;
      }
      if (!opts.history && (lead !== undefined || opts.from || opts.to)) return bad('--lead, --from and --to need --history');
      const dbPath = embeddedPathFor(ctx, opts, 'export');
      if (!dbPath) return;
      const store = new EmbeddedStore({ path: dbPath });
      try {
        let points: HistoryPoint[];
        if (opts.history) {
          points = await store.readForecastHistory(opts.series, { ...range, lead });
        } else {
          const latest = await store.readLatestForecast(opts.series);
          points = latest ? latest.points.map((p) => ({ ...p, issuedAt: latest.issuedAt })) : [];
        }
        if (points.length === 0) {
          ctx.io.err(`NO_FORECAST: no ${opts.history ? 'forecast history' : 'forecast'} for series "${opts.series}" in ${dbPath} (hint: run \`radcast once --config FILE\` first, or check the series name)\n`);
          ctx.fail(EXIT.FAILED);
          return;
        }
        const csv = forecastCsv(opts.series, points, opts.timeFormat as 'iso' | 'ms');
        if (opts.out) {
          writeFileSync(resolve(ctx.cwd, opts.out), csv);
          ctx.io.err(`wrote ${points.length} forecast rows of ${opts.series} to ${opts.out}\n`);
        } else ctx.io.out(csv);
      } finally {
        await store.close();
      }
    });
}
