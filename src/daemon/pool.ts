/**
 * Fitters: where fitAt + forecastAt run.
 *  - InlineFitter: in the calling thread (tests, `--workers 0`, tiny configs).
 *  - PoolFitter: a piscina pool of worker threads, so heavy fits never block the event loop
 *    (HTTP, schedules and signals stay responsive during a cycle). A request is structured-cloned:
 *    the regular window (a few thousand doubles) plus the previous model as the state store keeps
 *    it (packed bytes, decoded in the worker). The result's packed forecaster and forecast values
 *    are transferred back, not copied; the decoded forecaster stays in the worker unless asked for
 *    (returnFitted). Message costs: bench/cases/daemon-pool.ts.
 */
import { availableParallelism } from 'node:os';
import { Piscina } from 'piscina';
import { ForecastError } from '../forecast/errors.ts';
import { describeError } from './errors.ts';
import { runFitTask, type InlineFitResult } from './fit-task.ts';
import type { FitRequest, FitResult, Fitter } from './ports.ts';

const WORKER_FILE = new URL('./fit-worker.mjs', import.meta.url).href;

type WorkerReply = { ok: true; result: FitResult } | { ok: false; error: WorkerErrorFields };

interface WorkerErrorFields {
  name: string;
  code?: string;
  message: string;
  hint?: string;
  at?: string;
  field?: string;
  series?: string;
  retryable: boolean;
}

/** An error raised inside a fit worker, rebuilt in the main thread with its code, hint and location. */
export class WorkerTaskError extends Error {
  readonly code: string;
  readonly hint?: string;
  readonly at?: string;
  readonly field?: string;
  readonly series?: string;
  readonly retryable: boolean;
  constructor(f: WorkerErrorFields) {
    super(f.message);
    this.name = f.name;
    this.code = f.code ?? 'INTERNAL';
    if (f.hint !== undefined) this.hint = f.hint;
    if (f.at !== undefined) this.at = f.at;
    if (f.field !== undefined) this.field = f.field;
    if (f.series !== undefined) this.series = f.series;
    this.retryable = f.retryable;
  }
  canRetry(): boolean {
    return this.retryable;
  }
}

export class InlineFitter implements Fitter {
  readonly kind = 'inline' as const;
  get queued(): number {
    return 0;
  }
  async fitAndForecast(req: FitRequest, signal?: AbortSignal): Promise<InlineFitResult> {
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
    // A worker that dies is replaced by piscina; its task already got the error.
    this.#pool.on('error', () => undefined);
  }

  get queued(): number {
    return this.#pool.queueSize;
  }

  async fitAndForecast(req: FitRequest, signal?: AbortSignal): Promise<FitResult> {
    let reply: WorkerReply;
    try {
      reply = (await this.#pool.run(req, signal ? { signal } : undefined)) as WorkerReply;
    } catch (err) {
      // The worker itself failed (crash, out of memory, aborted task).
      const rec = describeError(err);
      throw new ForecastError({ code: 'WORKER_FAILED', series: req.settings.series, message: `fit worker failed: ${rec.message}`, hint: 'run with --workers 0 to see the failure in the main thread' });
    }
    if (reply.ok) return reply.result;
    throw new WorkerTaskError(reply.error);
  }

  /** Sends `payload` to a worker and back unchanged: the cost of the messages alone (benchmark). */
  async echo<T>(payload: T): Promise<T> {
    const reply = (await this.#pool.run(payload, { name: 'echo' })) as { ok: true; result: T };
    return reply.result;
  }

  /**
   * End the worker threads. Called after the scheduler stopped: every cycle the shutdown waited
   * for is done, so what still runs belongs to an abandoned cycle and is cut off.
   */
  async stop(): Promise<void> {
    await this.#pool.destroy();
  }
}
