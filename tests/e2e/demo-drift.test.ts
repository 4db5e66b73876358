/**
 * The demo run flags the demo data's late behaviour shift: tarrow-hill changes from 2025-11-03
 * (demo-data/manifest.json "shift"); the demo (src/cli/demo.ts) backtests, then replays daily
 * cycles over the last three weeks. The flag must come from the forecast-error detector (its
 * statistic crossing the watch threshold), not only from input novelty: the shift day is also the
 * coldest day of the season so far, which makes the inputs of every substation novel for a day.
 * brennick-yard, which has no shift, is the control on the same days.
 *
 * Runs the demo on a temp copy of config/demo.yaml with tarrow-hill, brennick-yard and the outdoor
 * temperature only (about two minutes on two cores).
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { parse, stringify } from 'yaml';
import { afterAll, describe, expect, it } from 'vitest';
import { loadConfigOrThrow } from '../../src/config/load.ts';
import { createContext } from '../../src/cli/context.ts';
import { runDemo } from '../../src/cli/demo.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import type { HealthPoint } from '../../src/store/types.ts';
import { DRIFT_DEFAULTS } from '../../src/drift/index.ts';

const ROOT = path.resolve(import.meta.dirname, '../..');
const DATA = path.join(ROOT, 'demo-data');
const manifest = JSON.parse(readFileSync(path.join(DATA, 'manifest.json'), 'utf8')) as { shift: { series: string; from: string } };
const SHIFT_MS = Date.parse(manifest.shift.from);
const DAY = 86_400_000;

const dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-demo-drift-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe('demo run and the late behaviour shift', () => {
  it(
    `flags ${manifest.shift.series} through the error detector within 3 days of the shift; the control series is not`,
    async () => {
      const cfg = parse(readFileSync(path.join(ROOT, 'config/demo.yaml'), 'utf8')) as Record<string, any>;
      cfg.store.embedded.path = path.join(dir, 'radcast.db');
      cfg.state.path = path.join(dir, 'radcast-state.db');
      cfg.http.port = 0;
      cfg.series = (cfg.series as Array<{ name: string }>).filter((s) => ['tarrow-hill', 'brennick-yard', 'oskaveld-outdoor-temp'].includes(s.name));
      const file = path.join(dir, 'demo.yaml');
      writeFileSync(file, stringify(cfg));
      const loaded = loadConfigOrThrow(file);
      const out: string[] = [];
      const ctx = createContext({ out: (t) => void out.push(t), err: (t) => void out.push(t) }, {}, ROOT);
      const res = await runDemo(ctx, loaded, { dataDir: DATA, replayDays: 21, reportPath: path.join(dir, 'report.html'), workers: 2, logLevel: 'silent', progress: () => undefined });
      expect(res, out.join('')).not.toBeNull();
      expect(res!.replayFromMs).toBeLessThanOrEqual(SHIFT_MS);

      const store = new EmbeddedStore({ path: cfg.store.embedded.path });
      const health = async (series: string): Promise<HealthPoint[]> => store.readHealth(series, res!.replayFromMs, res!.dataEndMs + DAY);
      const shifted = await health(manifest.shift.series);
      const control = await health('brennick-yard');
      await store.close();
      expect(shifted.length).toBeGreaterThanOrEqual(20);

      const after = shifted.filter((h) => h.t >= SHIFT_MS);
      const peak = Math.max(...after.map((h) => h.statistic));
      // The error detector crosses watch (novelty alone does not count) ...
      expect(peak).toBeGreaterThanOrEqual(DRIFT_DEFAULTS.watchThreshold);
      const firstFlag = after.find((h) => h.state === 'watch' || h.state === 'alert');
      expect(firstFlag).toBeDefined();
      expect(firstFlag!.t - SHIFT_MS).toBeLessThanOrEqual(3 * DAY);
      // ... and the series without a shift stays below it on the same days.
      expect(Math.max(...control.map((h) => h.statistic))).toBeLessThan(DRIFT_DEFAULTS.watchThreshold);
    },
    600_000,
  );
});
