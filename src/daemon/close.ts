/** Orderly end of the stores and the pool: stop the workers, flush buffered writes, close files. */
import type { Logger } from 'pino';
import type { SeriesStore } from '../store/types.ts';
import type { StateStore } from '../store/state.ts';
import type { Fitter } from './ports.ts';
import { describeError } from './errors.ts';

export async function flushAndClose(p: { fitter: Fitter; store: SeriesStore; stateStore: StateStore; logger: Logger }): Promise<void> {
  const step = async (what: string, fn: () => Promise<void> | void) => {
    try {
      await fn();
    } catch (err) {
      const e = describeError(err);
      p.logger.error({ code: e.code, err: e.message }, `${what} failed during shutdown`);
    }
  };
  await step('stopping the fit pool', () => p.fitter.stop());
  await step('flushing the store', () => p.store.flush());
  await step('closing the store', () => p.store.close());
  await step('closing the state store', () => p.stateStore.close());
}
