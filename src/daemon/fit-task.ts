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
  const t2 = now();
  const out: FitResult = { fitted, forecast, fitMs: t1 - t0, predictMs: t2 - t1 };
  if (holdout) out.holdout = holdout;
  return out;
}
