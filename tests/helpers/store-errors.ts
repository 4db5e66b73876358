import { StoreError } from '../../src/store/influx/errors.ts';

/** Awaits a promise that must fail with a StoreError and returns it (fails the test otherwise). */
export async function storeFailure(p: Promise<unknown>): Promise<StoreError> {
  let value: unknown;
  try {
    value = await p;
  } catch (err) {
    if (err instanceof StoreError) return err;
    throw new Error(`expected a StoreError, got ${String(err)}`, { cause: err });
  }
  throw new Error(`expected a StoreError, but it resolved with ${JSON.stringify(value)?.slice(0, 200)}`);
}
