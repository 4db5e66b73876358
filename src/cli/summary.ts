/** Text and JSON summaries of a run over many series (once, demo). */
import type { ForecastBatch } from '../store/types.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import type { RunSummary } from '../daemon/runner.ts';
import type { SeriesCycleResult } from '../daemon/cycle.ts';
import { STAGES } from '../daemon/timings.ts';

export interface Peak {
  t: number;
  value: number;
  lower: number | null;
  upper: number | null;
  lowerKey: string | null;
  upperKey: string | null;
}

/** The highest point of a forecast, with the outermost band around it. */
export function peakOf(batch: ForecastBatch): Peak | null {
  if (batch.points.length === 0) return null;
  const p = batch.points.reduce((a, b) => (b.value > a.value ? b : a));
  const keys = Object.keys(p.bands).sort((a, b) => Number(a) - Number(b));
  const lowerKey = keys.length >= 2 ? keys[0] : null;
  const upperKey = keys.length >= 2 ? keys[keys.length - 1] : null;
  return { t: p.t, value: p.value, lower: lowerKey ? p.bands[lowerKey] : null, upper: upperKey ? p.bands[upperKey] : null, lowerKey, upperKey };
}

export function localTime(ms: number, timeZone: string): string {
  const f = new Intl.DateTimeFormat('sv-SE', { timeZone, year: 'numeric', month: '2-digit', day: '2-digit', hour: '2-digit', minute: '2-digit', hour12: false });
  return f.format(new Date(ms)).replace(',', '');
}

const num = (v: number | null | undefined, d = 1) => (v === null || v === undefined || !Number.isFinite(v) ? '-' : v.toFixed(d));

/** Left-aligned text table. */
export function table(head: string[], rows: string[][]): string {
  const w = head.map((h, i) => Math.max(h.length, ...rows.map((r) => (r[i] ?? '').length)));
  const line = (r: string[]) => r.map((c, i) => (c ?? '').padEnd(w[i])).join('  ').trimEnd();
  return [line(head), line(w.map((n) => '-'.repeat(n))), ...rows.map(line)].join('\n') + '\n';
}

export function resultRow(r: SeriesCycleResult, s: ResolvedSeries | undefined): string[] {
  const tz = s?.settings.features.timeZone ?? 'UTC';
  const peak = r.forecast ? peakOf(r.forecast) : null;
  return [
    r.series,
    r.outcome,
    r.error?.code ?? '',
    r.issuedAt !== undefined ? localTime(r.issuedAt, tz) : '-',
    peak ? num(peak.value) : '-',
    peak ? localTime(peak.t, tz) : '-',
    peak && peak.lower !== null ? `${num(peak.lower)} .. ${num(peak.upper)}` : '-',
    r.drift?.state ?? '-',
    r.warmStarted === undefined ? '-' : r.warmStarted ? 'warm' : 'cold',
    num(r.timings.fit, 0),
  ];
}

export const RESULT_HEAD = ['series', 'outcome', 'code', 'origin (local)', 'peak', 'peak at (local)', 'band at peak', 'drift', 'fit', 'fit ms'];

export function formatRun(sum: RunSummary, byName: Map<string, ResolvedSeries>): string {
  let out = table(RESULT_HEAD, sum.results.map((r) => resultRow(r, byName.get(r.series))));
  out += `\n${sum.results.length} series: ${sum.ok} ok, ${sum.failed} failed, ${sum.stale} stale${sum.aborted ? `, ${sum.aborted} aborted` : ''}; wall ${(sum.wallMs / 1000).toFixed(2)} s\n`;
  out += `work by stage (ms, summed over series): ${STAGES.map((k) => `${k} ${Math.round(sum.timings[k])}`).join(', ')}; pool overhead ${Math.round(sum.poolOverheadMs)}\n`;
  const codes = Object.entries(sum.byCode);
  if (codes.length) out += `failures by code: ${codes.map(([c, n]) => `${c} ${n}`).join(', ')}\n`;
  for (const r of sum.results) {
    if (r.error) out += `  ${r.series}: ${r.error.code} ${r.error.message}${r.error.hint ? ` (hint: ${r.error.hint})` : ''}\n`;
  }
  return out;
}

export function runJson(sum: RunSummary): Record<string, unknown> {
  return {
    series: sum.results.length,
    ok: sum.ok,
    failed: sum.failed,
    stale: sum.stale,
    aborted: sum.aborted,
    byCode: sum.byCode,
    wallMs: sum.wallMs,
    timingsMs: sum.timings,
    poolOverheadMs: sum.poolOverheadMs,
    results: sum.results.map((r) => ({
      series: r.series,
      outcome: r.outcome,
      error: r.error ?? null,
      issuedAt: r.issuedAt ?? null,
      peak: r.forecast ? peakOf(r.forecast) : null,
      drift: r.drift ? { state: r.drift.state, statistic: r.drift.statistic, recentMase: r.drift.recentMase, baselineMase: r.drift.baselineMase, noveltyShare: r.drift.noveltyShare } : null,
      warmStarted: r.warmStarted ?? null,
      scored: r.scored,
      timingsMs: r.timings,
    })),
  };
}
