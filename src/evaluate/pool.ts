/**
 * Runs backtest chains inline or on worker threads (piscina). Results come back in task order
 * whatever the scheduling, and each chain is computed the same way in both modes, so the worker
 * count never changes a result.
 */
import { MessageChannel } from 'node:worker_threads';
import { availableParallelism } from 'node:os';
import { Piscina } from 'piscina';
import { runChain, type ChainResult, type ChainTask } from './backtest-chain.ts';
import { ForecastError, errorInfo } from '../forecast/errors.ts';

const WORKER_FILE = new URL('./backtest-worker.mjs', import.meta.url).href;

/** Worker threads used when the caller does not say: one per core, at most one per chain. */
export function defaultWorkers(nTasks: number): number {
  return Math.max(1, Math.min(availableParallelism(), nTasks));
}

export interface RunChainsOptions {
  /** 0 = run inline in this thread (no workers); >= 1 = that many worker threads. */
  workers: number;
  /** Called once per finished origin, with whether it succeeded. */
  onOrigin?: (ok: boolean) => void;
  signal?: AbortSignal;
}

export async function runChains(tasks: readonly ChainTask[], opts: RunChainsOptions): Promise<ChainResult[]> {
  if (tasks.length === 0) return [];
  const series = tasks[0].settings.series;
  if (opts.workers <= 0) {
    const out: ChainResult[] = [];
    for (const t of tasks) {
      if (opts.signal?.aborted) throw abortError(series);
      out.push(runChain(t, (o) => opts.onOrigin?.(o.ok)));
      // Let timers (progress bars, signals) run between chains.
      await new Promise((r) => setImmediate(r));
    }
    return out;
  }
  const pool = new Piscina({ filename: WORKER_FILE, maxThreads: opts.workers, minThreads: 0, idleTimeout: 1000, execArgv: [] });
  try {
    return await Promise.all(
      tasks.map(async (task) => {
        const { port1, port2 } = new MessageChannel();
        let reported = 0;
        port1.on('message', (m: { ok: boolean }) => {
          if (reported < task.origins.length) {
            reported++;
            opts.onOrigin?.(m.ok);
          }
        });
        try {
          const res = (await pool.run({ task, port: port2 }, { transferList: [port2], signal: opts.signal ?? null })) as ChainResult;
          // Messages can trail the result; count what is still missing from the outcome list.
          for (let i = reported; i < res.outcomes.length; i++) {
            reported++;
            opts.onOrigin?.(res.outcomes[i].ok);
          }
          return res;
        } catch (err) {
          if (opts.signal?.aborted) throw abortError(series);
          const info = errorInfo(err);
          throw new ForecastError({ code: 'WORKER_FAILED', series, message: `backtest worker failed: ${info.message}`, hint: 'run with --workers 0 to see the failure in the main thread' });
        } finally {
          port1.close();
        }
      }),
    );
  } finally {
    await pool.destroy();
  }
}

function abortError(series: string): ForecastError {
  return new ForecastError({ code: 'WORKER_FAILED', series, message: 'backtest aborted', hint: 'the caller cancelled the run' });
}
