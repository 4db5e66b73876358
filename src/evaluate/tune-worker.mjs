// Worker-thread entry of the tune pool (piscina): one task = one combination of the grid, its
// backtest run inline in this thread. Plain .mjs that registers tsx itself, like
// backtest-worker.mjs, so the pool works under the CLI, under tsx and inside test runners.
import { register } from 'tsx/esm/api';

register();
const { runTuneTask } = await import('./tune-task.ts');

/** Runs one combination; posts progress {id, done, total, failed} on `port` after each origin. */
export default async function run({ task, port }) {
  try {
    return await runTuneTask(task, port ? (p) => port.postMessage(p) : undefined);
  } finally {
    port?.close();
  }
}
