/**
 * Benchmark runner: `npm run bench` runs every case in bench/cases; `npm run bench -- NAME...`
 * runs the cases whose file name contains one of the given words. Each case prints its own table
 * (medians, sizes); the runner prints the machine first so results can be compared.
 */
import { readdirSync } from 'node:fs';
import os from 'node:os';
import { fileURLToPath, pathToFileURL } from 'node:url';
import path from 'node:path';

const dir = path.join(path.dirname(fileURLToPath(import.meta.url)), 'cases');
const wanted = process.argv.slice(2).filter((a) => !a.startsWith('-'));
const cases = readdirSync(dir)
  .filter((f) => f.endsWith('.ts'))
  .filter((f) => wanted.length === 0 || wanted.some((w) => f.includes(w)))
  .sort();

const cpu = os.cpus()[0]?.model ?? 'unknown cpu';
console.log(`machine: ${os.cpus().length} x ${cpu}, ${(os.totalmem() / 2 ** 30).toFixed(1)} GiB, node ${process.version}`);
for (const f of cases) {
  console.log(`\n=== ${f.replace(/\.ts$/, '')} ===`);
  const mod = await import(pathToFileURL(path.join(dir, f)).href);
  if (typeof mod.run !== 'function') throw new Error(`bench case ${f} exports no run()`);
  await mod.run(process.argv.slice(2));
}
