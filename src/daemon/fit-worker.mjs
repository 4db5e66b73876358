// Worker-thread entry of the daemon's fit pool (piscina). Plain .mjs so it loads without a
// loader flag; it registers tsx itself, so the pool works under the CLI, tsx and test runners.
// A module that fails to load fails every task with its error (fast), instead of killing the
// worker at start-up and leaving queued tasks waiting for a worker that never comes.
import { register } from 'tsx/esm/api';
import { Piscina } from 'piscina';

register();
let runFitTask = null;
let loadError = null;
try {
  ({ runFitTask } = await import('./fit-task.ts'));
} catch (err) {
  loadError = err;
}

/**
 * One fit request in (structured clone), { ok: true, result } or { ok: false, error } out.
 * The packed forecaster and the forecast values are moved to the main thread (their buffers are
 * transferred, not copied); the decoded forecaster stays here unless the request asks for it.
 * Errors travel as plain fields, since a cloned Error loses its code, hint and location.
 */
export default function fit(req) {
  try {
    if (loadError) throw loadError;
    const result = runFitTask(req);
    if (!req.returnFitted) delete result.fitted;
    const transfer = [result.stored.buffer];
    if (result.forecast.values.buffer !== result.stored.buffer && result.forecast.values.byteLength === result.forecast.values.buffer.byteLength) transfer.push(result.forecast.values.buffer);
    return Piscina.move({ [Piscina.transferableSymbol]: transfer, [Piscina.valueSymbol]: { ok: true, result } });
  } catch (err) {
    const e = err && typeof err === 'object' ? err : { message: String(err) };
    let retryable = false;
    try {
      retryable = typeof e.canRetry === 'function' ? Boolean(e.canRetry()) : e.retryable === true;
    } catch {
      retryable = false;
    }
    return {
      ok: false,
      error: {
        name: typeof e.name === 'string' ? e.name : 'Error',
        code: typeof e.code === 'string' ? e.code : undefined,
        message: typeof e.message === 'string' ? e.message : String(err),
        hint: typeof e.hint === 'string' ? e.hint : undefined,
        at: typeof e.at === 'string' ? e.at : undefined,
        field: typeof e.field === 'string' ? e.field : undefined,
        series: typeof e.series === 'string' ? e.series : undefined,
        retryable,
      },
    };
  }
}

/** Returns the request unchanged: the message round trip alone, for the pool benchmark. */
export function echo(req) {
  return { ok: true, result: req };
}
