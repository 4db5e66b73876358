// Worker-thread entry of the daemon's fit pool (piscina). Plain .mjs so it loads without a
// loader flag; it registers tsx itself, so the pool works under the CLI, tsx and test runners.
import { register } from 'tsx/esm/api';

register();
const { runFitTask } = await import('./fit-task.ts');

/** One fit request in, one FitResult out (structured clone both ways). */
export default function fit(req) {
  return runFitTask(req);
}
