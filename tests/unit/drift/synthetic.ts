/**
 * Synthetic matured-forecast error streams with a known change (test helper, not a test file).
 *
 * Process: hourly deviations u_t = phi * u_{t-1} + e_t (AR(1); e normal or Student-t with 4
 * degrees of freedom scaled to unit variance). The forecaster is the optimal one for the process
 * before the change: u-hat(T | origin T-h) = phi^h * u_{T-h}, issued every step with horizon H, so
 * every target step matures H forecasts at once (leads 1..H), as in an hourly daemon cycle.
 * Errors are divided by the MASE scale (mean |u_t - u_{t-season}| over a training stretch), and
 * the baseline MASE per lead is measured on an in-control backtest stretch, as the daemon does.
 *
 * Changes at step `changeAt` (0-based within the scored stretch):
 *  - scaleMult: innovations multiplied (a scale change of the series' noise);
 *  - levelShift: u shifted by levelShift * MASE scale (a level shift; the forecaster's lag input
 *    carries most of it, so the error grows with the lead as (1 - phi^h) * shift).
 */
import { mulberry32, type Random } from '../../../src/model/random.ts';
import type { MaturedError } from '../../../src/drift/scaled.ts';

export interface StreamOptions {
  seed: number;
  /** Scored target steps. */
  steps: number;
  phi: number;
  horizon?: number;
  season?: number;
  heavyTails?: boolean;
  changeAt?: number;
  scaleMult?: number;
  levelShift?: number;
  /** Extra error (in MASE-scale units) added to the single target step `spikeAt`, all leads. */
  spikeAt?: number;
  spikeSize?: number;
  /** Build the MaturedError objects (default true); false gives only `ratios` (fast). */
  objects?: boolean;
}

export interface Stream {
  /** matured[i] = the H matured errors of target step i (t = T0 + i hours); empty when objects is false. */
  matured: MaturedError[][];
  /** ratios[i] = mean over the leads of scaledError / baselineByLead(lead) for target step i. */
  ratios: Float64Array;
  baselineMase: number;
  baselineByLead: number[];
  scale: number;
  t0: number;
}

const HOUR = 3_600_000;

function gaussian(rnd: Random): number {
  // Box–Muller
  let u = 0;
  while (u === 0) u = rnd();
  return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * rnd());
}

function innovation(rnd: Random, heavy: boolean): number {
  if (!heavy) return gaussian(rnd);
  // Student t, 4 d.o.f.: N / sqrt(chi2_4 / 4); variance 2, so divide by sqrt(2).
  let chi = 0;
  for (let i = 0; i < 4; i++) {
    const g = gaussian(rnd);
    chi += g * g;
  }
  return gaussian(rnd) / Math.sqrt(chi / 4) / Math.SQRT2;
}

export function makeStream(o: StreamOptions): Stream {
  const H = o.horizon ?? 24;
  const m = o.season ?? 24;
  const rnd = mulberry32(o.seed);
  const train = 24 * 7 * 8; // scale window (8 weeks)
  const backtest = 24 * 7 * 4; // baseline stretch (4 weeks)
  const lead = Math.max(H, m) + 50;
  const n = lead + train + backtest + o.steps;
  const u = new Float64Array(n);
  const scoredStart = lead + train + backtest;
  const changeIdx = o.changeAt === undefined ? Infinity : scoredStart + o.changeAt;
  for (let t = 1; t < n; t++) {
    let e = innovation(rnd, o.heavyTails ?? false);
    if (t >= changeIdx && o.scaleMult !== undefined) e *= o.scaleMult;
    u[t] = o.phi * u[t - 1] + e;
  }
  let sum = 0;
  for (let t = lead; t < lead + train; t++) sum += Math.abs(u[t] - u[t - m]);
  const scale = sum / train;
  if (o.levelShift !== undefined) for (let t = changeIdx; t < n; t++) u[t] += o.levelShift * scale;

  const phiPow = new Float64Array(H + 1);
  for (let h = 0; h <= H; h++) phiPow[h] = o.phi ** h;
  const err = (T: number, h: number) => Math.abs(u[T] - phiPow[h] * u[T - h]) / scale;

  const byLead = new Array<number>(H).fill(0);
  for (let T = lead + train; T < scoredStart; T++) for (let h = 1; h <= H; h++) byLead[h - 1] += err(T, h);
  for (let h = 0; h < H; h++) byLead[h] /= backtest;
  const baselineMase = byLead.reduce((a, b) => a + b, 0) / H;

  const t0 = Date.UTC(2026, 0, 5);
  const matured: MaturedError[][] = [];
  const ratios = new Float64Array(o.steps);
  const objects = o.objects ?? true;
  for (let i = 0; i < o.steps; i++) {
    const T = scoredStart + i;
    const row: MaturedError[] = [];
    let r = 0;
    for (let h = 1; h <= H; h++) {
      let se = err(T, h);
      if (o.spikeAt === i) se += o.spikeSize ?? 0;
      r += se / byLead[h - 1];
      if (objects) row.push({ t: t0 + i * HOUR, lead: h, scaledError: se });
    }
    ratios[i] = r / H;
    if (objects) matured.push(row);
  }
  return { matured, ratios, baselineMase, baselineByLead: byLead, scale, t0 };
}
