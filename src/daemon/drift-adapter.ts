/**
 * Wiring of src/drift into the cycle (the DriftAssessor integration point): the series' resolved
 * drift settings become the detector's DriftSettings, the reference error level comes from the
 * stored baseline (a backtest's MASE when one ran, else the hold-out MASE of the last cold fit),
 * and each assessment's notice (transition or alert reminder) is handed to `onNotice` for the
 * webhook outbox.
 */
import type { Logger } from 'pino';
import type { ResolvedSeries } from '../config/resolve.ts';
import { assessDrift, DRIFT_DEFAULTS, type DriftNotice, type DriftSettings } from '../drift/index.ts';
import type { DriftAssessment, DriftAssessor, DriftInput } from './ports.ts';
import type { DriftBaseline } from './state-adapter.ts';

const DAY_MS = 86_400_000;

/**
 * DriftSettings of a series from its resolved config. Config keys map one to one where the drift
 * layer has them (thresholds, novelty, staleAfter); `delta` is the detector's allowance, `dwell`
 * becomes steps, and the batch (time scale of the statistic) is one day of steps, as the drift
 * layer's defaults assume for hourly series.
 */
export function driftSettingsFor(r: ResolvedSeries): DriftSettings {
  const step = r.settings.stepMs;
  const d = r.drift;
  return {
    ...DRIFT_DEFAULTS,
    allowance: d.delta,
    watchThreshold: d.watchThreshold,
    alertThreshold: d.alertThreshold,
    batchSteps: Math.max(1, Math.round(DAY_MS / step)),
    dwellSteps: Math.max(0, Math.round(d.dwellMs / step)),
    novelty: { activation: d.novelty.activation, share: d.novelty.share, windowSteps: d.novelty.windowSteps },
    staleAfterMs: d.staleAfterMs,
    repeatAlertMs: d.webhook ? d.webhook.resendEveryMs : DRIFT_DEFAULTS.repeatAlertMs,
  };
}

export interface BaselineSource {
  getBaseline(series: string): DriftBaseline | null;
  putBaseline(series: string, b: DriftBaseline): void;
}

export interface DriftWiringOptions {
  baselines: BaselineSource;
  logger: Logger;
  /** Transition and reminder notices (the webhook outbox takes them). */
  onNotice?: (n: DriftNotice, r: ResolvedSeries) => void;
}

export class CycleDriftAssessor implements DriftAssessor {
  readonly #o: DriftWiringOptions;

  constructor(opts: DriftWiringOptions) {
    this.#o = opts;
  }

  assess(input: DriftInput): DriftAssessment {
    const { baselines, logger } = this.#o;
    let baseline = baselines.getBaseline(input.series);
    // A hold-out MASE from a cold fit refreshes a hold-out baseline, never a backtest one.
    if (input.baselineMase !== null && Number.isFinite(input.baselineMase) && input.baselineMase > 0 && baseline?.source !== 'backtest') {
      baseline = { mase: input.baselineMase, source: 'holdout', atMs: input.nowMs };
      baselines.putBaseline(input.series, baseline);
    }
    const res = assessDrift({
      series: input.series,
      prior: input.previous,
      matured: input.matured.map((m) => ({ t: m.t, lead: m.lead, scaledError: m.scaledError })),
      novelty: input.novelty !== null ? [{ t: input.nowMs, activation: input.novelty }] : [],
      lastReadingAt: input.lastReadingAt,
      now: input.nowMs,
      stepMs: input.resolved.settings.stepMs,
      baselineMase: baseline?.mase ?? null,
      baselineMaseByLead: baseline?.byLead ?? null,
      settings: driftSettingsFor(input.resolved),
    });
    for (const p of res.problems) logger.warn({ series: input.series, code: p.code, hint: p.hint, count: p.count }, p.message);
    if (res.notice) this.#o.onNotice?.(res.notice, input.resolved);
    const out: DriftAssessment = {
      state: res.state,
      statistic: res.figures.statistic,
      recentMase: res.figures.recentMase,
      baselineMase: res.figures.baselineMase,
      noveltyShare: res.figures.noveltyShare,
      next: res.memory,
    };
    if (res.transition) out.transition = { from: res.transition.from, to: res.transition.to };
    return out;
  }
}
