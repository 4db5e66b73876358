/**
 * The work of one fit request, the same inline and on a worker thread: fitAt then forecastAt,
 * each timed. Pure computation on the data in the request.
 */
import { fitAt, forecastAt, type HoldoutResiduals } from '../forecast/engine.ts';
import type { FitRequest, FitResult } from './ports.ts';

export function runFitTask(req: FitRequest, now: () => number = () => performance.now()): FitResult {
  const t0 = now();
  let holdout: HoldoutResiduals | undefined;
  const fitted = fitAt(req.target, req.exo, req.settings, req.originIndex, req.warm ?? undefined, {
    holdout: req.holdout,
    onHoldout: (h) => {
      holdout = h;
    },
  });
  const t1 = now();
  const forecast = forecastAt(fitted, req.target, req.exo, req.settings, req.originIndex);
  // Novelty of the inputs at the steps before the origin, with the model just fitted: the
  // drift layer's novelty share then covers every recent step, whatever the refit schedule.
  const recentNovelty: Array<{ t: number; activation: number }> = [];
  for (let k = Math.min(req.noveltySteps ?? 0, req.originIndex) - 1; k >= 1; k--) {
    try {
      recentNovelty.push({ t: req.target.startMs + (req.originIndex - k) * req.target.stepMs, activation: forecastAt(fitted, req.target, req.exo, req.settings, req.originIndex - k).novelty });
    } catch {
      // An input that cannot be built (a gap) has no novelty; the others still count.
    }
  }
  const t2 = now();
  const out: FitResult = { fitted, forecast, fitMs: t1 - t0, predictMs: t2 - t1 };
  if (holdout) out.holdout = holdout;
  if (recentNovelty.length) out.recentNovelty = recentNovelty;
  return out;
}
