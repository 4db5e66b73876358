/**
 * Fitters: where fitAt + forecastAt run.
 *  - InlineFitter: in the calling thread (tests, `--workers 0`, tiny configs).
 *  - PoolFitter: a piscina pool of worker threads, so heavy fits never block the event loop
 *    (HTTP, schedules and signals stay responsive during a cycle). Requests and results are
 *    structured-cloned; a request is the regular window (a few thousand doubles) plus the previous
 *    model, so the message cost is small next to a fit (measured in bench/cases/daemon-pool.ts).
 */
import { availableParallelism } from 'node:os';
import { Piscina } from 'piscina';
import { ForecastError } from '../forecast/errors.ts';
import { describeError } from './errors.ts';
import { runFitTask } from './fit-task.ts';
import type { FitRequest, FitResult, Fitter } from './ports.ts';

const WORKER_FILE = new URL('./fit-worker.mjs', import.meta.url).href;

export class InlineFitter implements Fitter {
  readonly kind = 'inline' as const;
  get queued(): number {
    return 0;
  }
  async fitAndForecast(req: FitRequest, signal?: AbortSignal): Promise<FitResult> {
    signal?.throwIfAborted();
    // Yield first so a long run of inline fits still lets timers and I/O in between.
    await new Promise((r) => setImmediate(r));
    return runFitTask(req);
  }
  async stop(): Promise<void> {}
}

export interface PoolFitterOptions {
  /** Worker threads (default: cores). */
  threads?: number;
  /** Idle worker lifetime before it exits (ms). */
  idleTimeoutMs?: number;
}

export class PoolFitter implements Fitter {
  readonly kind = 'pool' as const;
  readonly #pool: Piscina;
  readonly threads: number;

  constructor(opts: PoolFitterOptions = {}) {
    this.threads = Math.max(1, opts.threads ?? availableParallelism());
    this.#pool = new Piscina({
      filename: WORKER_FILE,
      minThreads: this.threads,
      maxThreads: this.threads,
      idleTimeout: opts.idleTimeoutMs ?? 60_000,
      // Workers do not inherit --inspect or test-runner flags; they register tsx themselves.
      execArgv: [],
    });
  }

  get queued(): number {
    return this.#pool.queueSize;
  }

  async fitAndForecast(req: FitRequest, signal?: AbortSignal): Promise<FitResult> {
    try {
      return (await this.#pool.run(req, signal ? { signal } : undefined)) as FitResult;
    } catch (err) {
      // Errors thrown in the worker arrive as plain Errors with their own props copied; keep the code.
      const rec = describeError(err);
      if (rec.code !== 'INTERNAL') throw err;
      throw new ForecastError({ code: 'WORKER_FAILED', series: req.settings.series, message: `fit worker failed: ${rec.message}`, hint: 'run with workers 0 to see the failure in the main thread' });
    }
  }

  async stop(): Promise<void> {
    await this.#pool.close({ force: false });
  }
}
