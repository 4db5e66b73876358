/**
 * The work of one fit request, the same inline and on a worker thread: decode the stored warm
 * start, fitAt, forecastAt, pack the fitted forecaster for the state store; each part timed. Pure
 * computation on the data in the request, so the main thread never parses or serialises a model.
 */
import { decodeFittedForecaster, encodeFittedForecaster, fitAt, forecastAt, noveltyAt, type FittedForecaster, type HoldoutResiduals } from '../forecast/engine.ts';
import type { FitRequest, FitResult } from './ports.ts';

/** A fit result that carries the decoded forecaster too (inline fits). */
export type InlineFitResult = FitResult & { fitted: FittedForecaster };

export function runFitTask(req: FitRequest, now: () => number = () => performance.now()): InlineFitResult {
  const t0 = now();
  let warm: FittedForecaster | undefined = req.warm ?? undefined;
  let warmRejected: FitResult['warmRejected'];
  if (!warm && req.warmStored != null) {
    try {
      warm = decodeFittedForecaster(req.warmStored, req.settings.series);
    } catch (err) {
      const e = err as { code?: unknown; message?: unknown };
      warmRejected = { code: typeof e.code === 'string' ? e.code : 'BAD_FITTED', message: typeof e.message === 'string' ? e.message : String(err) };
    }
  }
  let holdout: HoldoutResiduals | undefined;
  const fitted = fitAt(req.target, req.exo, req.settings, req.originIndex, warm, {
    holdout: req.holdout,
    onHoldout: (h) => {
      holdout = h;
    },
  });
  const t1 = now();
  const forecast = forecastAt(fitted, req.target, req.exo, req.settings, req.originIndex);
  // Novelty of the inputs at the steps before the origin, with the model just fitted: the
  // drift layer's novelty share then covers every recent step, whatever the refit schedule.
  // One batched prediction; an input that cannot be built (a gap) has no novelty, the others still count.
  const back: number[] = [];
  for (let k = Math.min(req.noveltySteps ?? 0, req.originIndex) - 1; k >= 1; k--) back.push(req.originIndex - k);
  const recentNovelty: Array<{ t: number; activation: number }> = [];
  noveltyAt(fitted, req.target, req.exo, req.settings, back).forEach((activation, i) => {
    if (activation !== null) recentNovelty.push({ t: req.target.startMs + back[i] * req.target.stepMs, activation });
  });
  const t2 = now();
  const stored = encodeFittedForecaster(fitted);
  const t3 = now();
  const out: InlineFitResult = { stored, warmStarted: fitted.warmStarted, fitted, forecast, fitMs: t1 - t0 + (t3 - t2), predictMs: t2 - t1 };
  if (warmRejected) out.warmRejected = warmRejected;
  if (holdout) out.holdout = holdout;
  if (recentNovelty.length) out.recentNovelty = recentNovelty;
  return out;
}
