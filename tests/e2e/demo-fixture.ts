/**
 * A temp copy of config/demo.yaml whose store and state files live in a fresh temp folder, with
 * the demo data (invented Oskaveld scenario) loaded into its embedded store.
 */
import { copyFileSync, mkdirSync, mkdtempSync, readFileSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawn } from 'node:child_process';
import { EmbeddedStore } from '../../src/store/embedded.ts';
import { parseReadingsCsv } from '../../src/cli/csv.ts';

export const ROOT = path.resolve(import.meta.dirname, '../..');
/** End of the demo data (exclusive): demo-data/manifest.json "endExclusive". */
export const DEMO_END_MS = Date.parse(JSON.parse(readFileSync(path.join(ROOT, 'demo-data/manifest.json'), 'utf8')).endExclusive);

export interface DemoFixture {
  dir: string;
  config: string;
  storePath: string;
  statePath: string;
  cleanup(): void;
}

export function demoFixture(opts: { series?: string[] } = {}): DemoFixture {
  const dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-e2e-'));
  mkdirSync(path.join(dir, 'config'));
  const config = path.join(dir, 'config', 'demo.yaml');
  copyFileSync(path.join(ROOT, 'config/demo.yaml'), config);
  // config/demo.yaml keeps its files in ../var/demo relative to itself.
  const storePath = path.join(dir, 'var/demo/radcast.db');
  const statePath = path.join(dir, 'var/demo/radcast-state.db');
  const store = new EmbeddedStore({ path: storePath });
  const names = opts.series ?? ['oskaveld-north', 'brennick-yard', 'tarrow-hill', 'oskaveld-outdoor-temp'];
  store.transaction(() => {
    for (const n of names) store.writeReadings(n, parseReadingsCsv(readFileSync(path.join(ROOT, 'demo-data', `${n}.csv`), 'utf8')).readings);
  });
  store.close();
  return { dir, config, storePath, statePath, cleanup: () => rmSync(dir, { recursive: true, force: true }) };
}

export interface CliRun {
  code: number | null;
  signal: NodeJS.Signals | null;
  stdout: string;
  stderr: string;
}

/** Runs bin/radcast.mjs as a child process. */
export function radcast(args: string[], opts: { env?: Record<string, string>; timeoutMs?: number } = {}): Promise<CliRun> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, [path.join(ROOT, 'bin/radcast.mjs'), ...args], { cwd: ROOT, env: { ...process.env, ...opts.env }, stdio: ['ignore', 'pipe', 'pipe'] });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d) => (stdout += d));
    child.stderr.on('data', (d) => (stderr += d));
    const timer = setTimeout(() => child.kill('SIGKILL'), opts.timeoutMs ?? 120_000);
    child.on('error', reject);
    child.on('close', (code, signal) => {
      clearTimeout(timer);
      resolve({ code, signal, stdout, stderr });
    });
  });
}

/** Parsed JSON log lines of a stream (non-JSON lines are kept as { raw }). */
export function logLines(text: string): Array<Record<string, unknown>> {
  return text
    .split('\n')
    .filter((l) => l.trim())
    .map((l) => {
      try {
        return JSON.parse(l) as Record<string, unknown>;
      } catch {
        return { raw: l };
      }
    });
}
