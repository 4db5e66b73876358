/**
 * The tune report: one self-contained HTML file (chart.js inlined, no network) with the ranking,
 * a heatmap of MASE over window x number of centres (each cell the best MASE over the other tuned
 * keys), the MASE by lead time of the top settings beside the seasonal-naive baselines, and MASE
 * per origin of the top settings (the spread the noise rule looks at).
 *
 * Same safety rules as the backtest report (report.ts, whose helpers are reused): text from data
 * or config is HTML-escaped or travels as JSON in a non-executable script element and is drawn on
 * canvases; a CSP allows only the two inline scripts by hash.
 */
import type { TuneResult, RankedEntry } from './tune.ts';
import { NOISE_SE_MULTIPLE, num as fmt, rankingCells } from './tune.ts';
import { formatStep } from './backtest.ts';
import { escapeHtml, renderReportPage } from './report.ts';

export interface TuneReportOptions {
  title?: string;
  generatedAt?: Date;
  /** IANA zone of the origin labels (default UTC). */
  timeZone?: string;
  /** Settings of the best combination as YAML, shown under the ranking. */
  snippet?: string;
  /** Settings drawn in the lead and origin charts (default 5). */
  topCurves?: number;
  /** Rows of the ranking table (default 25). */
  topRows?: number;
}

function timeLabel(ms: number, timeZone: string): string {
  const f = new Intl.DateTimeFormat('en-GB', { timeZone, year: 'numeric', month: '2-digit', day: '2-digit', hour: '2-digit', minute: '2-digit', hour12: false });
  const p = Object.fromEntries(f.formatToParts(new Date(ms)).map((x) => [x.type, x.value]));
  return `${p.year}-${p.month}-${p.day} ${p.hour}:${p.minute}`;
}

/** Best MASE per (window, K) cell, with the label of the setting that reached it. */
export function heatmapCells(r: TuneResult): { windows: Array<{ steps: number; label: string }>; centres: number[]; cells: Array<Array<{ mase: number; label: string; rank: number } | null>> } {
  const windows = [...new Map(r.ranking.map((e) => [e.windowSteps, String(e.values.window)])).entries()].sort((a, b) => a[0] - b[0]).map(([steps, label]) => ({ steps, label }));
  const centres = [...new Set(r.ranking.map((e) => e.values.centres))].sort((a, b) => a - b);
  const cells = windows.map((w) =>
    centres.map((k) => {
      let best: RankedEntry | undefined;
      for (const e of r.ranking) if (e.windowSteps === w.steps && e.values.centres === k && e.score.model.mase !== null && (!best || e.rank < best.rank)) best = e;
      return best ? { mase: best.score.model.mase as number, label: best.label, rank: best.rank } : null;
    }),
  );
  return { windows, centres, cells };
}

const PAGE_SCRIPT = `
(function () {
  'use strict';
  var data = JSON.parse(document.getElementById('radcast-tune-data').textContent);
  var palette = ['#1f6f5c', '#6b5ca5', '#2f6f9f', '#8a8d2f', '#9c3d6b', '#4a5a60'];
  var drawn = 0;
  function mix(a, b, t) {
    return 'rgb(' + [0, 1, 2].map(function (i) { return Math.round(a[i] + (b[i] - a[i]) * t); }).join(',') + ')';
  }
  function heat(t) {
    var good = [31, 111, 92], mid = [242, 232, 207], bad = [181, 86, 43];
    return t < 0.5 ? mix(good, mid, t * 2) : mix(mid, bad, (t - 0.5) * 2);
  }
  var hm = data.heatmap;
  var canvas = document.getElementById('heatmap');
  if (canvas && hm.windows.length && hm.centres.length) {
    var cssW = canvas.parentNode.clientWidth || 640;
    var rowH = 44, top = 34, left = 86, bottom = 40;
    var cssH = top + rowH * hm.windows.length + bottom;
    var dpr = window.devicePixelRatio || 1;
    canvas.width = Math.round(cssW * dpr);
    canvas.height = Math.round(cssH * dpr);
    canvas.style.width = cssW + 'px';
    canvas.style.height = cssH + 'px';
    var g = canvas.getContext('2d');
    g.scale(dpr, dpr);
    g.font = '13px system-ui, sans-serif';
    var vals = [];
    hm.cells.forEach(function (row) { row.forEach(function (c) { if (c) vals.push(c.mase); }); });
    var lo = Math.min.apply(null, vals), hi = Math.max.apply(null, vals);
    var colW = (cssW - left - 10) / hm.centres.length;
    g.fillStyle = '#1d2630';
    g.textAlign = 'center';
    g.fillText('centres K', left + (cssW - left - 10) / 2, cssH - 8);
    hm.centres.forEach(function (k, j) { g.fillText(String(k), left + colW * (j + 0.5), cssH - bottom + 16); });
    g.save();
    g.textAlign = 'left';
    g.fillText('MASE (best over the other tuned keys), window x K; colour from ' + lo.toFixed(3) + ' (green) to ' + hi.toFixed(3) + ' (orange)', left, 20);
    g.restore();
    hm.windows.forEach(function (w, i) {
      g.textAlign = 'right';
      g.fillStyle = '#1d2630';
      g.fillText(w.label, left - 10, top + rowH * (i + 0.5) + 4);
      hm.centres.forEach(function (k, j) {
        var c = hm.cells[i][j];
        var x = left + colW * j, y = top + rowH * i;
        var t = c && hi > lo ? (c.mase - lo) / (hi - lo) : 0;
        g.fillStyle = c ? heat(t) : '#e6e8e1';
        g.fillRect(x + 1, y + 1, colW - 2, rowH - 2);
        g.textAlign = 'center';
        g.fillStyle = c && (t < 0.25 || t > 0.8) ? '#ffffff' : '#1d2630';
        g.fillText(c ? c.mase.toFixed(3) + (c.rank === 1 ? ' ★' : '') : 'not run', x + colW / 2, y + rowH / 2 + 4);
      });
    });
    drawn++;
  }
  Chart.defaults.animation = false;
  Chart.defaults.font.family = 'system-ui, sans-serif';
  data.charts.forEach(function (c) {
    var el = document.getElementById(c.id);
    if (!el) return;
    new Chart(el, {
      type: 'line',
      data: {
        labels: c.labels,
        datasets: c.series.map(function (s, i) {
          var colour = s.baseline ? (s.dash ? '#b5562b' : '#c98a2b') : palette[i % palette.length];
          return { label: s.name, data: s.values, borderColor: colour, backgroundColor: colour, borderWidth: s.best ? 3 : 1.5, borderDash: s.baseline ? [5, 4] : [], pointRadius: s.baseline ? 0 : 2, spanGaps: true };
        })
      },
      options: {
        responsive: true,
        maintainAspectRatio: false,
        interaction: { mode: 'index', intersect: false },
        plugins: { title: { display: true, text: c.title } },
        scales: {
          x: { ticks: { maxTicksLimit: 12, autoSkip: true }, title: { display: true, text: c.xTitle } },
          y: { title: { display: true, text: c.yTitle } }
        }
      }
    });
    drawn++;
  });
  window.radcastChartsDrawn = drawn;
})();
`;

const BASELINE_LABEL: Record<string, string> = {
  'seasonal-naive-daily': 'seasonal naive (day)',
  'seasonal-naive-weekly': 'seasonal naive (week)',
  'ridge-ar': 'ridge autoregression',
};

function rankingTable(r: TuneResult, rows: number): string {
  const { head, rows: cells } = rankingCells(r, rows, 'html');
  const body = cells.map((row, i) => {
    const e = r.ranking[i];
    const cls = e.rank === 1 ? 'best' : e.vsBest?.withinNoise ? 'noise' : '';
    return `<tr class="${cls}">${row.map((c) => `<td>${escapeHtml(c)}</td>`).join('')}</tr>`;
  });
  return `<table class="ranking"><thead><tr>${head.map((h) => `<th scope="col">${escapeHtml(h)}</th>`).join('')}</tr></thead><tbody>${body.join('')}</tbody></table>`;
}

/** Renders the tune report. */
export function renderTuneReport(r: TuneResult, opts: TuneReportOptions = {}): string {
  const title = opts.title ?? `radcast tune: ${r.series}`;
  const tz = opts.timeZone ?? 'UTC';
  const topN = opts.topCurves ?? 5;
  const top = r.ranking.slice(0, topN);
  const best = r.ranking[0];
  const hm = heatmapCells(r);
  const charts: unknown[] = [];
  if (best) {
    const leadSeries: unknown[] = top.map((e) => ({ name: `#${e.rank} ${e.label}`, best: e.rank === 1, values: e.score.byLead.map((l) => l.mase) }));
    for (const [name, b] of Object.entries(best.score.baselines)) {
      if (!name.startsWith('seasonal-naive')) continue;
      leadSeries.push({ name: BASELINE_LABEL[name] ?? name, baseline: true, dash: name.endsWith('daily'), values: b.byLead.map((l) => l.mase) });
    }
    charts.push({ id: 'lead', title: `MASE by lead time: top ${top.length} settings and the seasonal-naive baselines (same origins, same scale)`, xTitle: 'lead (steps)', yTitle: 'MASE', labels: Array.from({ length: r.horizon }, (_, h) => String(h + 1)), series: leadSeries });
    const times = r.originTimes;
    charts.push({
      id: 'origins',
      title: `MASE per origin of the top ${Math.min(3, top.length)} settings (the spread behind the noise rule)`,
      xTitle: `origin (${tz})`,
      yTitle: 'MASE',
      labels: times.map((t) => timeLabel(t, tz)),
      series: top.slice(0, 3).map((e) => {
        const at = new Map(e.score.originTimes.map((t, i) => [t, e.score.maseByOrigin[i]]));
        return { name: `#${e.rank} ${e.label}`, best: e.rank === 1, values: times.map((t) => at.get(t) ?? null) };
      }),
    });
  }
  const inNoise = r.ranking.filter((e) => e.vsBest?.withinNoise === true);
  const noiseText = !best
    ? 'No setting could be scored.'
    : inNoise.length
      ? `${inNoise.length} setting(s) are within the noise of the best (${inNoise.map((e) => `#${e.rank}`).join(', ')}): this backtest cannot tell them apart.`
      : r.ranking.length > 1
        ? `The best is ahead of every other setting by more than ${NOISE_SE_MULTIPLE} standard errors.`
        : 'Only one setting was scored.';
  const facts = [
    `step ${formatStep(r.stepMs)}`,
    `horizon ${r.horizon} steps`,
    `${r.origins} origins every ${r.everySteps} steps over the last ${r.spanSteps}`,
    `MASE scale: ${r.scaleWindowSteps} steps before each origin, m=${r.season}`,
    `${r.ranking.length} of ${r.gridSize} combinations ranked`,
    `seed ${r.seed}`,
    `${(r.elapsedMs / 1000).toFixed(1)} s`,
  ];
  if (r.stoppedByBudget) facts.push(`budget reached: ${r.notStarted.length} not run`);
  const heatTable = `<table class="heat"><caption>Best MASE per window and K</caption><thead><tr><th scope="col">window \\ K</th>${hm.centres.map((k) => `<th scope="col">${k}</th>`).join('')}</tr></thead><tbody>${hm.windows
    .map((w, i) => `<tr><th scope="row">${escapeHtml(w.label)}</th>${hm.cells[i].map((c) => `<td>${c ? escapeHtml(fmt(c.mase)) : 'not run'}</td>`).join('')}</tr>`)
    .join('')}</tbody></table>`;
  const skipped = [...r.failed.map((f) => `${f.label}: ${f.code} ${f.message}`), ...r.skipped.map((s) => `${s.label}: ${s.code} ${s.message}`), ...r.notStarted.map((n) => `${n.label}: not started (budget)`)];
  return renderReportPage({
    title,
    subtitle: `generated ${(opts.generatedAt ?? new Date()).toISOString()} · every setting backtested on the same rolling origins; MASE scaled per origin by the mean absolute seasonal difference over the same span before it (Hyndman & Koehler 2006), so windows compare`,
    css: `section { background: #fff; border: 1px solid #d9ddd3; border-radius: 6px; margin: 18px 0; padding: 4px 18px 18px; }
h2 { font-size: 17px; margin: 14px 0 6px; }
.facts span { display: inline-block; margin: 0 14px 4px 0; color: #4a5a60; }
table { border-collapse: collapse; margin: 10px 0; }
th, td { padding: 4px 10px; border-bottom: 1px solid #e6e8e1; text-align: right; }
table.ranking tr.best { background: #eef5f0; font-weight: 600; }
table.ranking tr.noise { background: #f7f7ee; }
pre { background: #f2f4ef; padding: 10px 14px; border-radius: 4px; }
.grid { display: grid; grid-template-columns: repeat(auto-fit, minmax(520px, 1fr)); gap: 14px; }
.plot { position: relative; height: 320px; }
.heatwrap { position: relative; }
details { color: #4a5a60; margin: 8px 0; }`,
    main: `<section>
<h2>${escapeHtml(r.series)}</h2>
<p class="facts">${facts.map((f) => `<span>${escapeHtml(f)}</span>`).join('')}</p>
<p class="noise">${escapeHtml(noiseText)} <small>${escapeHtml(r.noise.rule)}</small></p>
${rankingTable(r, opts.topRows ?? 25)}
${opts.snippet ? `<h2>Best settings</h2><pre>${escapeHtml(opts.snippet)}</pre>` : ''}
${skipped.length ? `<details><summary>${skipped.length} combination(s) not ranked</summary><ul>${skipped.map((s) => `<li>${escapeHtml(s)}</li>`).join('')}</ul></details>` : ''}
</section>
<section>
<h2>MASE over window × K</h2>
<div class="heatwrap"><canvas id="heatmap" role="img" aria-label="heatmap of MASE over training window and number of centres"></canvas></div>
<details><summary>numbers</summary>${heatTable}</details>
</section>
<section>
<h2>Error by lead time and over origins</h2>
<div class="grid">
${charts.map((c) => `<figure><div class="plot"><canvas id="${escapeHtml((c as { id: string }).id)}" role="img"></canvas></div></figure>`).join('\n')}
</div>
</section>`,
    dataId: 'radcast-tune-data',
    data: { heatmap: hm, charts },
    pageScript: PAGE_SCRIPT,
  });
}
