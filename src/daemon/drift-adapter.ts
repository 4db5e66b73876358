/**
 * Wiring of src/drift into the cycle (the DriftAssessor integration point): the series' resolved
 * drift settings become the detector's DriftSettings, the reference error level comes from the
 * stored baseline (a backtest's MASE when one ran, else the hold-out MASE of the last cold fit),
 * and each assessment's notice (transition or alert reminder) is handed to `onNotice` for the
 * webhook outbox.
 */
import type { Logger } from 'pino';
import type { ResolvedSeries } from '../config/resolve.ts';
import { assessDrift, type DriftNotice, type DriftSettings } from '../drift/index.ts';
import type { DriftAssessment, DriftAssessor, DriftInput } from './ports.ts';
import type { DriftBaseline } from './state-adapter.ts';

/** DriftSettings of a series: the config resolves every drift key into them (src/config/resolve.ts). */
export function driftSettingsFor(r: ResolvedSeries): DriftSettings {
  return r.drift.settings;
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
      novelty: [...(input.recentNovelty ?? []), ...(input.novelty !== null ? [{ t: input.nowMs, activation: input.novelty }] : [])],
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
