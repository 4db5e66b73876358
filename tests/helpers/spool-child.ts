/**
 * Child process for the write-spool crash test. Opens the InfluxDB store the way the daemon does
 * (config file -> openSeriesStore with durable writes), writes cycles 0..2 and flushes them, prints
 * "ready", then waits for "down" on stdin (the test has stopped the server) and writes cycle after
 * cycle, printing "wrote N {stats}" after each cycle's writes returned, until it is killed.
 *
 *   node --import tsx spool-child.ts CONFIG T0
 */
import { createInterface } from 'node:readline';
import { loadConfigFile } from '../../src/config/load.ts';
import { loadSecrets } from '../../src/config/secrets.ts';
import { openSeriesStore } from '../../src/store/index.ts';
import type { InfluxStore } from '../../src/store/influx/index.ts';
import { writeSpoolCycle } from './spool-cycles.ts';

const [file, t0Arg] = process.argv.slice(2);
const t0 = Number(t0Arg);
const loaded = loadConfigFile(file);
if (!loaded.ok) throw new Error(loaded.issues.map((i) => `${i.path}: ${i.message}`).join('\n'));
const config = loaded.value.config;
const store = (await openSeriesStore(config, { secrets: loadSecrets(config).secrets, durableWrites: true })) as InfluxStore;

for (let n = 0; n < 3; n++) await writeSpoolCycle(store, t0, n);
await store.flush();
process.stdout.write(`ready ${JSON.stringify(store.stats())}\n`);

const lines = createInterface({ input: process.stdin });
for await (const line of lines) if (line.trim() === 'down') break;

for (let n = 3; ; n++) {
  await writeSpoolCycle(store, t0, n);
  process.stdout.write(`wrote ${n} ${JSON.stringify(store.stats())}\n`);
  await new Promise((r) => setTimeout(r, 10));
}
