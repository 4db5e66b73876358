/**
 * The read-only status page at `/`: every series with its drift state and last run, and per series
 * a chart (chart.js, served from node_modules) of recent actuals, the latest forecast and its band.
 *
 * Every string that comes from the config or the store is escaped here (`escapeHtml`); chart data
 * travels as JSON from /api/series/NAME and is set as text, never as markup. The page has no
 * inline script, so the Content-Security-Policy can forbid inline code altogether.
 */
import type { SeriesStatus } from './status.ts';

/** Escape text for HTML element content and quoted attribute values. */
export function escapeHtml(s: unknown): string {
  return String(s).replace(/[&<>"'`=]/g, (c) => `&#${c.charCodeAt(0)};`);
}

/** Data behind one series chart (the JSON of /api/series/NAME). */
export interface ChartData {
  series: string;
  timeZone: string;
  stepMs: number;
  /** [t, v] pairs, epoch ms; v may be null (missing). */
  actuals: Array<[number, number | null]>;
  forecast: null | {
    issuedAt: number;
    /** Quantile keys of the lower and upper band, e.g. "0.1" and "0.9" (null when no band). */
    lowerKey: string | null;
    upperKey: string | null;
    points: Array<{ t: number; lead: number; value: number; lower: number | null; upper: number | null }>;
  };
  driftState: string | null;
}

export const PAGE_SIZE = 25;

const STATE_LABEL: Record<string, string> = { ok: 'ok', watch: 'watch', alert: 'alert', stale: 'stale' };

function fmtTime(ms: number | null, timeZone: string): string {
  if (ms === null) return '–';
  try {
    return new Intl.DateTimeFormat('en-GB', { timeZone, dateStyle: 'short', timeStyle: 'short' }).format(new Date(ms));
  } catch {
    return new Date(ms).toISOString();
  }
}

function fmtNum(v: number | null, digits = 2): string {
  return v === null || !Number.isFinite(v) ? '–' : v.toFixed(digits);
}

export interface PageOptions {
  title: string;
  nowMs: number;
  page: number;
  /** Only series whose name contains this (case-insensitive). */
  filter?: string;
}

/** Render the status page. Pure: the caller supplies the statuses. */
export function renderPage(statuses: SeriesStatus[], opts: PageOptions): string {
  const filter = (opts.filter ?? '').trim().toLowerCase();
  const shown = filter ? statuses.filter((s) => s.series.toLowerCase().includes(filter)) : statuses;
  const pages = Math.max(1, Math.ceil(shown.length / PAGE_SIZE));
  const page = Math.min(Math.max(1, opts.page), pages);
  const slice = shown.slice((page - 1) * PAGE_SIZE, page * PAGE_SIZE);
  const counts: Record<string, number> = { ok: 0, watch: 0, alert: 0, stale: 0, none: 0, failing: 0 };
  for (const s of statuses) {
    if (s.driftEnabled) counts[s.driftState ?? 'none']++;
    if (s.lastError) counts.failing++;
  }

  const rows = slice
    .map((s) => {
      const state = s.driftEnabled ? (s.driftState ?? 'none') : 'off';
      const err = s.lastError ? `<span class="err" title="${escapeHtml(s.lastError.message)}">${escapeHtml(s.lastError.code)}</span>` : '';
      return `<tr>
<td><a href="#chart-${escapeHtml(idFor(s.series))}">${escapeHtml(s.series)}</a></td>
<td><span class="state state-${escapeHtml(state)}">${escapeHtml(STATE_LABEL[state] ?? (state === 'off' ? 'off' : 'not yet'))}</span></td>
<td class="num">${escapeHtml(fmtNum(s.recentMase))}</td>
<td class="num">${escapeHtml(fmtNum(s.noveltyShare))}</td>
<td>${escapeHtml(fmtTime(s.lastSuccessAt, s.timeZone))}</td>
<td>${err}</td>
<td><code>${escapeHtml(s.schedule)}</code></td>
</tr>`;
    })
    .join('\n');

  const charts = slice
    .map(
      (s) => `<section class="chart" id="chart-${escapeHtml(idFor(s.series))}" data-series="${escapeHtml(s.series)}">
<h2>${escapeHtml(s.series)} <span class="state state-${escapeHtml(s.driftEnabled ? (s.driftState ?? 'none') : 'off')}">${escapeHtml(s.driftEnabled ? (STATE_LABEL[s.driftState ?? ''] ?? 'not yet') : 'drift off')}</span></h2>
<div class="canvas-box"><canvas aria-label="${escapeHtml(`recent actuals and forecast of ${s.series}`)}" role="img"></canvas></div>
<p class="note" data-role="note"></p>
</section>`,
    )
    .join('\n');

  const q = (p: number) => `?page=${p}${filter ? `&amp;filter=${escapeHtml(encodeURIComponent(opts.filter ?? ''))}` : ''}`;
  const nav =
    pages > 1
      ? `<nav class="pages">${page > 1 ? `<a href="${q(page - 1)}">&larr; previous</a>` : ''} page ${page} of ${pages} ${
          page < pages ? `<a href="${q(page + 1)}">next &rarr;</a>` : ''
        }</nav>`
      : '';

  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${escapeHtml(opts.title)}</title>
<link rel="stylesheet" href="/assets/page.css">
<script src="/assets/chart.umd.min.js" defer></script>
<script src="/assets/page.js" defer></script>
</head>
<body>
<header>
<h1>${escapeHtml(opts.title)}</h1>
<p class="summary">${statuses.length} series · ok ${counts.ok} · watch ${counts.watch} · alert ${counts.alert} · stale ${counts.stale} · not yet assessed ${counts.none} · failing ${counts.failing} · rendered ${escapeHtml(new Date(opts.nowMs).toISOString())}</p>
<form method="get" action="/"><input name="filter" value="${escapeHtml(opts.filter ?? '')}" placeholder="filter series"> <button>show</button></form>
</header>
<main>
<table class="series">
<thead><tr><th>series</th><th>drift</th><th>recent MASE</th><th>novelty</th><th>last success</th><th>last error</th><th>schedule</th></tr></thead>
<tbody>
${rows || '<tr><td colspan="7">no series</td></tr>'}
</tbody>
</table>
${nav}
${charts}
</main>
<footer><p>Read-only. Forecasts support decisions; they do not replace operating procedures.</p></footer>
</body>
</html>
`;
}

/** A DOM id for a series (ids may not contain everything a series name can). */
export function idFor(series: string): string {
  let h = 2166136261;
  for (let i = 0; i < series.length; i++) h = Math.imul(h ^ series.charCodeAt(i), 16777619);
  return `${series.replace(/[^A-Za-z0-9_-]/g, '_').slice(0, 40)}-${(h >>> 0).toString(36)}`;
}

export const PAGE_CSS = `
:root { --ink: #1f2a30; --muted: #5d6b73; --line: #d5dde1; --ok: #2f7d4f; --watch: #b07d12; --alert: #b3312f; --stale: #6b5fa8; }
body { font: 14px/1.45 system-ui, sans-serif; color: var(--ink); margin: 0 1.5rem 2rem; }
header h1 { font-size: 1.3rem; margin: 1rem 0 0.2rem; }
.summary { color: var(--muted); margin: 0 0 0.6rem; }
table.series { border-collapse: collapse; width: 100%; margin: 0.8rem 0; }
table.series th, table.series td { text-align: left; padding: 0.25rem 0.6rem; border-bottom: 1px solid var(--line); }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.state { display: inline-block; padding: 0 0.45rem; border-radius: 0.6rem; font-size: 0.8rem; color: #fff; background: var(--muted); }
.state-ok { background: var(--ok); } .state-watch { background: var(--watch); } .state-alert { background: var(--alert); } .state-stale { background: var(--stale); }
.err { color: var(--alert); font-family: ui-monospace, monospace; }
section.chart { margin: 1.4rem 0; }
section.chart h2 { font-size: 1.05rem; margin: 0 0 0.3rem; }
.canvas-box { position: relative; height: 260px; max-width: 1100px; }
.note { color: var(--muted); margin: 0.2rem 0; }
footer { color: var(--muted); margin-top: 2rem; }
`;
