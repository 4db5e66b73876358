// Worker-thread entry of the backtest pool (piscina). Plain .mjs so it loads without a loader;
// it registers tsx itself, so the pool works under the CLI, under tsx and inside test runners.
import { register } from 'tsx/esm/api';

register();
const { runChain } = await import('./backtest-chain.ts');

/** Runs one chain of origins; posts {ok} on `port` after each origin for progress. */
export default function run({ task, port }) {
  try {
    return runChain(task, port ? (o) => port.postMessage({ ok: o.ok }) : undefined);
  } finally {
    port?.close();
  }
}
