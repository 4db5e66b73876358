/**
 * Drift detector figures with the default settings, on synthetic matured-forecast errors
 * (tests/unit/drift/synthetic.ts: AR(1) deviations with persistence phi, normal or Student-t(4)
 * innovations, optimal pre-change forecaster, hourly cycle, H = 24 leads per target step):
 *  - false alerts: share of in-control series-years with at least one alert; watch episodes a year
 *  - detection delay after a change at a known step, in matured target steps (hours), per change:
 *    level shift of 2 and 3 MASE-scale units, error scale x1.5 and x2; "miss" = no alert in 20 days
 *  - cost of one assessDrift call (one hourly cycle: 24 matured forecasts; one daily cycle: 576)
 *
 *   npm run bench -- drift [--runs N]      (default 40 series-years / changes per cell)
 */
import { assessDrift, DRIFT_DEFAULTS, detectorStep, initialDetector, SPREAD_PRIOR_BATCHES } from '../../src/drift/index.ts';
import { makeStream } from '../../tests/unit/drift/synthetic.ts';

const DAY = 24;
const HOUR = 3_600_000;

function levels(ratios: Float64Array): string[] {
  const d = initialDetector(DRIFT_DEFAULTS, SPREAD_PRIOR_BATCHES);
  const out: string[] = [];
  for (const r of ratios) {
    detectorStep(d, r, DRIFT_DEFAULTS);
    out.push(d.level);
  }
  return out;
}

function quantile(v: number[], q: number): number {
  const s = [...v].sort((a, b) => a - b);
  return s[Math.min(s.length - 1, Math.floor(q * s.length))];
}

function pad(cells: (string | number)[], widths: number[]): string {
  return cells.map((c, i) => String(c).padStart(widths[i])).join('  ');
}

export async function run(argv: string[]): Promise<void> {
  const i = argv.indexOf('--runs');
  const runs = i >= 0 ? Number(argv[i + 1]) : 40;
  const changeAt = 30 * DAY;
  const changes = [
    ['level +2', { levelShift: 2 }],
    ['level +3', { levelShift: 3 }],
    ['scale x1.5', { scaleMult: 1.5 }],
    ['scale x2', { scaleMult: 2 }],
  ] as const;
  const widths = [5, 5, 12, 10, ...changes.map(() => 22)];
  console.log(`defaults: allowance ${DRIFT_DEFAULTS.allowance}, watch ${DRIFT_DEFAULTS.watchThreshold}, alert ${DRIFT_DEFAULTS.alertThreshold}, recovery ${DRIFT_DEFAULTS.recoveryThreshold} spreads; batch ${DRIFT_DEFAULTS.batchSteps} steps; ${runs} runs per cell`);
  console.log('delay columns: median / p90 / max matured target steps to alert (miss = none within 20 days)');
  console.log(pad(['phi', 'tails', 'false alert', 'watch/yr', ...changes.map(([n]) => n)], widths));
  for (const phi of [0, 0.5, 0.8, 0.9]) {
    for (const heavyTails of [false, true]) {
      let alerted = 0;
      let watchEpisodes = 0;
      for (let seed = 1; seed <= runs; seed++) {
        const lv = levels(makeStream({ seed, steps: 365 * DAY, phi, heavyTails, objects: false }).ratios);
        if (lv.includes('alert')) alerted++;
        for (let k = 1; k < lv.length; k++) if (lv[k] !== 'ok' && lv[k - 1] === 'ok') watchEpisodes++;
      }
      const cells: string[] = [];
      for (const [, opt] of changes) {
        const delays: number[] = [];
        let miss = 0;
        for (let seed = 10_001; seed <= 10_000 + runs; seed++) {
          const lv = levels(makeStream({ seed, steps: changeAt + 20 * DAY, phi, heavyTails, changeAt, objects: false, ...opt }).ratios);
          const at = lv.indexOf('alert', changeAt);
          if (at < 0) miss++;
          else delays.push(at - changeAt);
        }
        cells.push(delays.length ? `${quantile(delays, 0.5)}/${quantile(delays, 0.9)}/${Math.max(...delays)}${miss ? ` miss ${miss}` : ''}` : `miss ${miss}`);
      }
      console.log(pad([phi, heavyTails ? 't4' : 'normal', `${alerted}/${runs}`, (watchEpisodes / runs).toFixed(2), ...cells], widths));
    }
  }

  // Cost of one call.
  const s = makeStream({ seed: 3, steps: 60 * DAY, phi: 0.8 });
  for (const perCycle of [1, 24]) {
    const times: number[] = [];
    let prior: unknown = null;
    for (let k = 0; k + perCycle <= s.matured.length; k += perCycle) {
      const now = s.t0 + (k + perCycle - 1) * HOUR;
      const matured = s.matured.slice(k, k + perCycle).flat();
      const t = performance.now();
      const r = assessDrift({ series: 'x', prior, matured, novelty: [{ t: now, activation: 0.5 }], lastReadingAt: now, now, stepMs: HOUR, baselineMase: s.baselineMase, baselineMaseByLead: s.baselineByLead, settings: DRIFT_DEFAULTS });
      times.push(performance.now() - t);
      prior = JSON.parse(JSON.stringify(r.memory));
    }
    console.log(`assessDrift, ${perCycle * 24} matured forecasts per call: median ${(quantile(times, 0.5) * 1000).toFixed(0)} us over ${times.length} calls; memory ${JSON.stringify(prior).length} bytes of JSON`);
  }
}
