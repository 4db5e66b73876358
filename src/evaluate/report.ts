/**
 * The backtest report: one self-contained HTML file (chart.js inlined, no network) with, per
 * series, the method x metric table, actuals vs forecasts with bands at selected origins, error by
 * lead time for the model and the baselines, and MASE per origin over time.
 *
 * Every text that comes from data or config (series names, error messages) reaches the page
 * either HTML-escaped or as JSON inside a non-executable script element with <, > and & escaped,
 * and is put into the DOM with textContent; chart labels are drawn on the canvas.
 */
import { readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { createHash } from 'node:crypto';
import path from 'node:path';
import type { BacktestResult, MethodResult } from './backtest.ts';
import { formatStep } from './backtest.ts';

export interface ReportOptions {
  title?: string;
  /** Shown in the header; default now. */
  generatedAt?: Date;
  /** IANA zone for the time labels per series name (default UTC). */
  timeZones?: Record<string, string>;
  /** Origins drawn as forecast charts per series (default 3: newest, median and worst MASE). */
  originCharts?: number;
}

/** Escapes text for HTML element content and attribute values. */
export function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[c] as string);
}

/** JSON safe inside a <script> element: no "</script", no "<!--", no line separators that break parsing. */
export function jsonForScript(value: unknown): string {
  return JSON.stringify(value)
    .replace(/</g, '\\u003c')
    .replace(/>/g, '\\u003e')
    .replace(/&/g, '\\u0026')
    .replace(/\u2028/g, '\\u2028')
    .replace(/\u2029/g, '\\u2029');
}

let chartSource: string | undefined;
/** chart.js UMD source, safe to inline in a <script> element (also used by the tune report). */
export function chartJs(): string {
  if (chartSource === undefined) {
    const require = createRequire(import.meta.url);
    // The UMD build is not in the package's exports map; it sits beside the CommonJS entry.
    const file = path.join(path.dirname(require.resolve('chart.js')), 'chart.umd.js');
    chartSource = readFileSync(file, 'utf8').replace(/<\/script/gi, '<\\/script');
  }
  return chartSource;
}

const METHOD_LABEL: Record<string, string> = {
  rbf: 'RBF network',
  'seasonal-naive-daily': 'seasonal naive (day)',
  'seasonal-naive-weekly': 'seasonal naive (week)',
  'ridge-ar': 'ridge autoregression',
};

function label(name: string): string {
  return METHOD_LABEL[name] ?? name;
}

function fmt(v: number | null | undefined, digits = 3): string {
  if (v === null || v === undefined || !Number.isFinite(v)) return '–';
  const a = Math.abs(v);
  if (a !== 0 && (a >= 1e5 || a < 1e-3)) return v.toExponential(2);
  return v.toFixed(digits);
}

function timeLabel(ms: number, timeZone: string): string {
  const f = new Intl.DateTimeFormat('en-GB', { timeZone, year: 'numeric', month: '2-digit', day: '2-digit', hour: '2-digit', minute: '2-digit', hour12: false });
  const p = Object.fromEntries(f.formatToParts(new Date(ms)).map((x) => [x.type, x.value]));
  return `${p.year}-${p.month}-${p.day} ${p.hour}:${p.minute}`;
}

/** Origins worth drawing: the newest, the one of median MASE and the worst. */
function pickOrigins(r: BacktestResult, n: number): number[] {
  const model = r.methods.find((m) => m.kind === 'model');
  const count = r.details.length;
  if (count === 0 || n <= 0) return [];
  const idx = new Set<number>([count - 1]);
  if (model) {
    const order = model.byOrigin.map((o, i) => ({ i, m: o.mase ?? -Infinity })).sort((a, b) => a.m - b.m);
    if (order.length) {
      idx.add(order[order.length - 1].i);
      idx.add(order[Math.floor(order.length / 2)].i);
    }
  }
  for (let i = 0; idx.size < Math.min(n, count) && i < count; i++) idx.add(Math.floor((i * count) / n));
  return [...idx].slice(0, n).sort((a, b) => a - b);
}

function metricsTable(r: BacktestResult): string {
  const q = r.quantiles;
  const lo = q[0];
  const hi = q[q.length - 1];
  const head = ['method', 'MAE', 'RMSE', `MASE (m=${r.season})`, 'bias', `coverage (nominal ${fmt(r.methods[0]?.overall.nominalCoverage ?? null, 2)})`, 'mean width', 'pinball', 'points'];
  const rows = r.methods.map((m: MethodResult) => {
    const o = m.overall;
    const cells = [label(m.name) + (m.m ? ` (m=${m.m})` : ''), fmt(o.mae), fmt(o.rmse), fmt(o.mase), fmt(o.bias), fmt(o.coverage, 3), fmt(o.width), fmt(o.pinball), String(o.n)];
    return `<tr class="${m.kind}">${cells.map((c, i) => (i === 0 ? `<th scope="row">${escapeHtml(c)}</th>` : `<td>${escapeHtml(c)}</td>`)).join('')}</tr>`;
  });
  return `<table class="metrics"><caption>Scored on ${r.origins} origins; bands ${escapeHtml(String(lo))}..${escapeHtml(String(hi))} from residuals matured before each origin.</caption><thead><tr>${head
    .map((h) => `<th scope="col">${escapeHtml(h)}</th>`)
    .join('')}</tr></thead><tbody>${rows.join('')}</tbody></table>`;
}

/** CSP source of an inline script: only the two scripts written here may run, nothing injected. */
export function scriptHash(code: string): string {
  return `'sha256-${createHash('sha256').update(code, 'utf8').digest('base64')}'`;
}

/** Draws every chart described in the JSON data element; sets window.radcastChartsDrawn. */
/** Style shared by every radcast report page (backtest, tune). */
const BASE_CSS = `body { font: 14px/1.45 system-ui, sans-serif; margin: 0; color: #1d2630; background: #f6f7f4; }
header { padding: 18px 28px; background: #20343a; color: #f2f5ef; }
header h1 { margin: 0 0 4px; font-size: 20px; font-weight: 600; }
header p { margin: 0; opacity: .8; }
main { padding: 8px 28px 40px; }`;

export interface ReportPage {
  title: string;
  /** Line under the title (plain text, escaped here). */
  subtitle: string;
  /** CSS after the shared base style. */
  css: string;
  /** Inner HTML of <main> (already escaped by the caller). */
  main: string;
  /** id of the JSON data element the page script reads, and its value. */
  dataId: string;
  data: unknown;
  /** The page's own script; it and chart.js are the only scripts the CSP lets run. */
  pageScript: string;
}

/**
 * One self-contained HTML report: chart.js inlined, data as JSON in a non-executing element, and a
 * content security policy that allows exactly the two inline scripts by hash.
 */
export function renderReportPage(p: ReportPage): string {
  const cjs = chartJs();
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; script-src ${scriptHash(cjs)} ${scriptHash(p.pageScript)}; style-src 'unsafe-inline'; img-src data:">
<title>${escapeHtml(p.title)}</title>
<style>
${BASE_CSS}
${p.css.trim()}
</style>
</head>
<body>
<header><h1>${escapeHtml(p.title)}</h1><p>${escapeHtml(p.subtitle)}</p></header>
<main>
${p.main}
</main>
<script type="application/json" id="${escapeHtml(p.dataId)}">${jsonForScript(p.data)}</script>
<script>${cjs}</script>
<script>${p.pageScript}</script>
</body>
</html>
`;
}

const PAGE_SCRIPT = `
(function () {
  'use strict';
  var data = JSON.parse(document.getElementById('radcast-report-data').textContent);
  var palette = ['#1f6f5c', '#b5562b', '#6b5ca5', '#8a8d2f', '#2f6f9f', '#9c3d6b'];
  var drawn = 0;
  Chart.defaults.animation = false;
  Chart.defaults.font.family = 'system-ui, sans-serif';
  data.charts.forEach(function (c) {
    var el = document.getElementById(c.id);
    if (!el) return;
    var datasets;
    if (c.kind === 'origin') {
      datasets = [
        { label: 'lower', data: c.lower, borderColor: 'rgba(31,111,92,0.35)', backgroundColor: 'rgba(31,111,92,0.15)', pointRadius: 0, borderWidth: 1, fill: false },
        { label: c.bandLabel, data: c.upper, borderColor: 'rgba(31,111,92,0.35)', backgroundColor: 'rgba(31,111,92,0.15)', pointRadius: 0, borderWidth: 1, fill: '-1' },
        { label: 'actual', data: c.actual, borderColor: '#1d2630', pointRadius: 0, borderWidth: 1.5 },
        { label: 'RBF forecast', data: c.model, borderColor: '#1f6f5c', pointRadius: 0, borderWidth: 2.5 },
        { label: 'seasonal naive (day)', data: c.naive, borderColor: '#b5562b', borderDash: [5, 4], pointRadius: 0, borderWidth: 1.5 }
      ];
    } else {
      datasets = c.series.map(function (s, i) {
        return { label: s.name, data: s.values, borderColor: palette[i % palette.length], backgroundColor: palette[i % palette.length], borderWidth: s.model ? 3 : 1.5, pointRadius: 2, spanGaps: true };
      });
    }
    new Chart(el, {
      type: 'line',
      data: { labels: c.labels, datasets: datasets },
      options: {
        responsive: true,
        maintainAspectRatio: false,
        interaction: { mode: 'index', intersect: false },
        plugins: {
          title: { display: true, text: c.title },
          legend: { labels: { filter: function (item) { return item.text !== 'lower'; } } }
        },
        scales: {
          x: { ticks: { maxTicksLimit: 8, autoSkip: true }, title: { display: !!c.xTitle, text: c.xTitle || '' } },
          y: { title: { display: !!c.yTitle, text: c.yTitle || '' } }
        }
      }
    });
    drawn++;
  });
  window.radcastChartsDrawn = drawn;
})();
`;

/** Renders the report of one or more backtests. */
export function renderBacktestReport(results: readonly BacktestResult[], opts: ReportOptions = {}): string {
  const title = opts.title ?? 'radcast backtest report';
  const generated = (opts.generatedAt ?? new Date()).toISOString();
  const nOrigins = opts.originCharts ?? 3;
  const charts: unknown[] = [];
  const sections: string[] = [];
  results.forEach((r, s) => {
    const tz = opts.timeZones?.[r.series] ?? 'UTC';
    const chartIds: string[] = [];
    for (const i of pickOrigins(r, nOrigins)) {
      const d = r.details[i];
      const labels: string[] = [];
      for (let k = -r.horizon + 1; k <= r.horizon; k++) labels.push(timeLabel(d.originMs + k * r.stepMs, tz));
      const pad = new Array<number | null>(r.horizon).fill(null);
      const bands = d.bands.rbf ?? [];
      const id = `c${s}-o${i}`;
      chartIds.push(id);
      charts.push({
        id,
        kind: 'origin',
        title: `Forecast from origin ${timeLabel(d.originMs, tz)} (${tz}, last observed step)`,
        labels,
        actual: [...d.history, ...d.actual],
        model: [...pad, ...(d.forecasts.rbf ?? [])],
        lower: [...pad, ...(bands[0] ?? [])],
        upper: [...pad, ...(bands[bands.length - 1] ?? [])],
        naive: [...pad, ...(d.forecasts['seasonal-naive-daily'] ?? [])],
        bandLabel: `band ${r.quantiles[0]}..${r.quantiles[r.quantiles.length - 1]}`,
      });
    }
    const leadId = `c${s}-lead`;
    charts.push({
      id: leadId,
      kind: 'lines',
      title: 'MAE by lead time',
      xTitle: 'lead (steps)',
      yTitle: 'MAE',
      labels: Array.from({ length: r.horizon }, (_, h) => String(h + 1)),
      series: r.methods.map((m) => ({ name: label(m.name), model: m.kind === 'model', values: m.byLead.map((x) => x.mae) })),
    });
    const maseId = `c${s}-mase`;
    charts.push({
      id: maseId,
      kind: 'lines',
      title: `MASE per origin (m=${r.season})`,
      xTitle: 'origin',
      yTitle: 'MASE',
      labels: r.originTimes.map((t) => timeLabel(t, tz)),
      series: r.methods.map((m) => ({ name: label(m.name), model: m.kind === 'model', values: m.byOrigin.map((x) => x.mase) })),
    });
    const facts = [
      `step ${formatStep(r.stepMs)}`,
      `horizon ${r.horizon} steps`,
      `window ${r.windowSteps} steps`,
      `origins every ${r.everySteps} steps over the last ${r.spanSteps}`,
      `season m=${r.season} steps`,
      `fit median ${fmt(r.fit.medianMs, 0)} ms (${r.fit.coldFits} cold, ${r.fit.warmFits} warm)`,
    ];
    if (r.auto.tunables.length) facts.push(`auto ${r.auto.tunables.join(', ')}: ${r.auto.chosen.map((c) => `K=${c.nCentres} ${c.widthMode} ridge=${c.ridge} (${c.origins} origins)`).join('; ')}`);
    const failed = r.failed.length
      ? `<details class="failed"><summary>${r.failed.length} origin(s) could not be forecast</summary><ul>${r.failed
          .map((f) => `<li>${escapeHtml(timeLabel(f.originMs, tz))}: ${escapeHtml(f.code)} — ${escapeHtml(f.message)}</li>`)
          .join('')}</ul></details>`
      : '';
    sections.push(`<section class="series">
<h2>${escapeHtml(r.series)}</h2>
<p class="facts">${facts.map((f) => `<span>${escapeHtml(f)}</span>`).join('')}</p>
${metricsTable(r)}
${failed}
<div class="grid">
${[...chartIds, leadId, maseId].map((id) => `<figure><div class="plot"><canvas id="${escapeHtml(id)}" role="img"></canvas></div></figure>`).join('\n')}
</div>
</section>`);
  });

  return renderReportPage({
    title,
    subtitle: `generated ${generated} · errors are actual − forecast; MASE is scaled by the in-sample mean absolute seasonal difference of each origin's training window (Hyndman & Koehler 2006)`,
    css: `section.series { background: #fff; border: 1px solid #d9ddd3; border-radius: 6px; margin: 18px 0; padding: 4px 18px 18px; }
h2 { font-size: 17px; margin: 14px 0 6px; }
.facts span { display: inline-block; margin: 0 14px 4px 0; color: #4a5a60; }
table.metrics { border-collapse: collapse; margin: 10px 0; min-width: 60%; }
table.metrics caption { text-align: left; color: #4a5a60; padding-bottom: 4px; }
table.metrics th, table.metrics td { padding: 4px 10px; border-bottom: 1px solid #e6e8e1; text-align: right; }
table.metrics th[scope=row], table.metrics thead th:first-child { text-align: left; }
table.metrics tr.model { background: #eef5f0; font-weight: 600; }
.grid { display: grid; grid-template-columns: repeat(auto-fit, minmax(460px, 1fr)); gap: 14px; }
figure { margin: 0; }
.plot { position: relative; height: 300px; }
details.failed { color: #7a3b1d; margin: 8px 0; }`,
    main: sections.join('\n'),
    dataId: 'radcast-report-data',
    data: { charts },
    pageScript: PAGE_SCRIPT,
  });
}
