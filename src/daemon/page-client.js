// Browser side of the status page: fetch each series' chart data as JSON and draw it with
// chart.js. Names and numbers are only ever set as text or chart data, never parsed as markup.
/* global Chart */
(function () {
  'use strict';
  var COLORS = { actual: '#33414a', forecast: '#0f7c8a', band: 'rgba(15, 124, 138, 0.18)' };

  function fmtFactory(timeZone) {
    var f;
    try {
      f = new Intl.DateTimeFormat('en-GB', { timeZone: timeZone, month: 'short', day: '2-digit', hour: '2-digit', minute: '2-digit' });
    } catch (e) {
      f = new Intl.DateTimeFormat('en-GB', { timeZone: 'UTC', month: 'short', day: '2-digit', hour: '2-digit', minute: '2-digit' });
    }
    return function (ms) { return f.format(new Date(ms)); };
  }

  function draw(section, data) {
    var canvas = section.querySelector('canvas');
    var note = section.querySelector('[data-role="note"]');
    var fmt = fmtFactory(data.timeZone);
    var actual = data.actuals.map(function (p) { return { x: p[0], y: p[1] }; });
    var datasets = [
      { label: 'actual', data: actual, borderColor: COLORS.actual, backgroundColor: COLORS.actual, pointRadius: 0, borderWidth: 1.5, spanGaps: false }
    ];
    if (data.forecast) {
      var pts = data.forecast.points;
      if (data.forecast.lowerKey && data.forecast.upperKey) {
        datasets.push({ label: 'band ' + data.forecast.lowerKey + '–' + data.forecast.upperKey + ' (lower)', data: pts.map(function (p) { return { x: p.t, y: p.lower }; }), borderColor: 'transparent', pointRadius: 0, fill: false });
        datasets.push({ label: 'band ' + data.forecast.lowerKey + '–' + data.forecast.upperKey, data: pts.map(function (p) { return { x: p.t, y: p.upper }; }), borderColor: 'transparent', backgroundColor: COLORS.band, pointRadius: 0, fill: '-1' });
      }
      datasets.push({ label: 'forecast', data: pts.map(function (p) { return { x: p.t, y: p.value }; }), borderColor: COLORS.forecast, backgroundColor: COLORS.forecast, pointRadius: 0, borderWidth: 2 });
      note.textContent = 'forecast issued at ' + fmt(data.forecast.issuedAt) + ' (' + data.timeZone + '), ' + pts.length + ' steps';
    } else {
      note.textContent = 'no forecast yet';
    }
    var chart = new Chart(canvas, {
      type: 'line',
      data: { datasets: datasets },
      options: {
        animation: false,
        maintainAspectRatio: false,
        parsing: true,
        interaction: { mode: 'nearest', intersect: false },
        scales: {
          x: { type: 'linear', ticks: { maxTicksLimit: 8, callback: function (v) { return fmt(v); } } },
          y: { beginAtZero: false }
        },
        plugins: {
          legend: { labels: { filter: function (item) { return item.text.indexOf('(lower)') < 0; } } },
          tooltip: { callbacks: { title: function (items) { return items.length ? fmt(items[0].parsed.x) : ''; } } }
        }
      }
    });
    section.setAttribute('data-drawn', String(chart.data.datasets.reduce(function (n, d) { return n + d.data.length; }, 0)));
  }

  function load(section) {
    var name = section.getAttribute('data-series');
    fetch('/api/series/' + encodeURIComponent(name), { headers: { accept: 'application/json' } })
      .then(function (r) { if (!r.ok) throw new Error('HTTP ' + r.status); return r.json(); })
      .then(function (data) { draw(section, data); })
      .catch(function (err) {
        section.setAttribute('data-drawn', 'error');
        section.querySelector('[data-role="note"]').textContent = 'chart data not available: ' + err.message;
      });
  }

  function init() {
    var sections = document.querySelectorAll('section.chart');
    for (var i = 0; i < sections.length; i++) load(sections[i]);
  }
  if (document.readyState === 'loading') document.addEventListener('DOMContentLoaded', init); else init();
})();
