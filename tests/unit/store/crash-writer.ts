/**
 * Child process for the crash test: writes forecast batches (24 leads each, one transaction per
 * batch) and readings into an embedded store file as fast as it can, printing a line after each
 * commit, until it is killed.
 */
import { EmbeddedStore } from '../../../src/store/embedded.ts';

const path = process.argv[2];
const store = new EmbeddedStore({ path });
const H = 24;
const step = 3_600_000;
for (let i = 0; ; i++) {
  const issuedAt = i * step;
  const batches = ['north', 'yard', 'hill'].map((series) => ({
    series,
    issuedAt,
    stepMs: step,
    points: Array.from({ length: H }, (_, l) => ({ t: issuedAt + (l + 1) * step, lead: l + 1, value: i * 1000 + l, bands: { '0.1': i - 1, '0.9': i + 1 } })),
  }));
  await store.writeForecasts(batches);
  store.writeReadings('north', Array.from({ length: 50 }, (_, k) => ({ t: i * 50 + k, v: i })));
  process.stdout.write(`committed ${i}\n`);
}
