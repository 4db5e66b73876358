/**
 * `radcast tune --write`: the tuned keys go into the series entry and every other line of the file
 * stays byte for byte, comments and their alignment included; a backup is made first.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, rmSync, writeFileSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import path from 'node:path';
import { parse } from 'yaml';
import { backupPath, editSeriesEntry, writeTunedConfig } from '../../../src/cli/tune-write.ts';
import { parseConfigText } from '../../../src/config/load.ts';

const DEMO = readFileSync(new URL('../../../config/demo.yaml', import.meta.url), 'utf8');

/** Lines of `after` that are not in `before` at the same position once the inserted lines are taken out. */
function lineDiff(before: string, after: string): { removed: string[]; added: string[] } {
  const a = before.split('\n');
  const b = after.split('\n');
  // Longest common subsequence of lines (small files): what is left over on each side changed.
  const n = a.length;
  const m = b.length;
  const L = Array.from({ length: n + 1 }, () => new Int32Array(m + 1));
  for (let i = n - 1; i >= 0; i--) for (let j = m - 1; j >= 0; j--) L[i][j] = a[i] === b[j] ? L[i + 1][j + 1] + 1 : Math.max(L[i + 1][j], L[i][j + 1]);
  const removed: string[] = [];
  const added: string[] = [];
  let i = 0;
  let j = 0;
  while (i < n && j < m) {
    if (a[i] === b[j]) {
      i++;
      j++;
    } else if (L[i + 1][j] >= L[i][j + 1]) removed.push(a[i++]);
    else added.push(b[j++]);
  }
  while (i < n) removed.push(a[i++]);
  while (j < m) added.push(b[j++]);
  return { removed, added };
}

describe('editing one series entry of the demo config', () => {
  it('replaces present keys in place and adds missing ones after the name line; nothing else changes', () => {
    // brennick-yard (series[1]) has centres: 48 of its own; window, widthMode and lags come from defaults.
    const r = editSeriesEntry(DEMO, 1, [
      { key: 'window', value: '16w' },
      { key: 'centres', value: 64 },
      { key: 'widthMode', value: 'per-centre' },
      { key: 'lags', value: ['1-48', 168] },
    ]);
    expect(r.ok).toBe(true);
    if (!r.ok) return;
    const d = lineDiff(DEMO, r.text);
    expect(d.removed).toEqual(['    centres: 48']);
    expect(d.added).toEqual(['    window: 16w', '    widthMode: per-centre', '    lags: ["1-48", 168]', '    centres: 64']);
    const lines = r.text.split('\n');
    const at = lines.indexOf('  - name: brennick-yard        # workshops and offices: strong working-day profile');
    expect(lines.slice(at + 1, at + 5)).toEqual(['    window: 16w', '    widthMode: per-centre', '    lags: ["1-48", 168]', '    centres: 64']);
    // Every comment of the file is still there, with its spacing.
    const comments = (t: string) => t.split('\n').filter((l) => l.includes('#'));
    expect(comments(r.text)).toEqual(comments(DEMO));
    // And the loader reads the new values for that series only.
    const loaded = parseConfigText(r.text);
    expect(loaded.ok).toBe(true);
    if (!loaded.ok) return;
    const by = new Map(loaded.value.series.map((s) => [s.name, s.settings]));
    expect(by.get('brennick-yard')!.windowSteps).toBe(16 * 168);
    expect(by.get('brennick-yard')!.fit).toMatchObject({ nCentres: 64, widthMode: 'per-centre' });
    expect(by.get('brennick-yard')!.features.lags).toHaveLength(49);
    expect(by.get('oskaveld-north')!.windowSteps).toBe(8 * 168);
  });

  it('keeps the comment on a replaced scalar and the layout of block lists', () => {
    const text = ['series:', '  - name: a   # first', '    window: 8w      # two months', '    lags:', '      - 1-24    # hourly', '      - 168', '    # trailing note', '    centres: 32', ''].join('\n');
    const r = editSeriesEntry(text, 0, [
      { key: 'window', value: '4w' },
      { key: 'lags', value: ['1-48'] },
    ]);
    expect(r.ok && r.text).toBe(['series:', '  - name: a   # first', '    window: 4w      # two months', '    lags:', '      - "1-48"', '    # trailing note', '    centres: 32', ''].join('\n'));
  });

  it('writes into a flow-style entry', () => {
    const text = 'series:\n  - { name: a, centres: 8 }  # compact\n';
    const r = editSeriesEntry(text, 0, [
      { key: 'centres', value: 16 },
      { key: 'window', value: 672 },
    ]);
    expect(r.ok && r.text).toBe('series:\n  - { name: a, window: 672, centres: 16 }  # compact\n');
    expect(parse((r as { text: string }).text)).toEqual({ series: [{ name: 'a', window: 672, centres: 16 }] });
  });

  it('refuses an edit it cannot verify, leaving the text alone', () => {
    expect(editSeriesEntry('series: []\n', 0, [{ key: 'centres', value: 8 }]).ok).toBe(false);
    expect(editSeriesEntry('series:\n  - name: a\n    centres:\n', 0, [{ key: 'centres', value: 8 }])).toMatchObject({ ok: false, code: 'CONFIG_EDIT' });
  });
});

describe('writing the file', () => {
  let dir: string;
  beforeEach(() => {
    dir = mkdtempSync(path.join(tmpdir(), 'radcast-tune-write-'));
  });
  afterEach(() => rmSync(dir, { recursive: true, force: true }));

  it('backs up to FILE.bak, then to a timestamped backup, and writes only the tuned keys', () => {
    const file = path.join(dir, 'radcast.yaml');
    writeFileSync(file, DEMO);
    const now = new Date(Date.UTC(2026, 0, 2, 3, 4, 5));
    const w1 = writeTunedConfig(file, 0, [{ key: 'centres', value: 16 }], { now });
    expect(w1).toMatchObject({ ok: true, backup: `${file}.bak` });
    expect(readFileSync(`${file}.bak`, 'utf8')).toBe(DEMO);
    const after1 = readFileSync(file, 'utf8');
    expect(lineDiff(DEMO, after1)).toEqual({ removed: [], added: ['    centres: 16'] });
    const w2 = writeTunedConfig(file, 0, [{ key: 'centres', value: 8 }], { now });
    expect(w2).toMatchObject({ ok: true, backup: `${file}.20260102T030405Z.bak` });
    expect(readFileSync(`${file}.20260102T030405Z.bak`, 'utf8')).toBe(after1);
    expect(lineDiff(after1, readFileSync(file, 'utf8'))).toEqual({ removed: ['    centres: 16'], added: ['    centres: 8'] });
    expect(backupPath(file, now, (p) => p === `${file}.bak` || p === `${file}.20260102T030405Z.bak`)).toBe(`${file}.20260102T030405Z-1.bak`);
  });

  it('leaves the file and makes no backup when the result would not load', () => {
    const file = path.join(dir, 'radcast.yaml');
    writeFileSync(file, DEMO);
    const w = writeTunedConfig(file, 0, [{ key: 'centres', value: 100_000 }], {
      validate: (t) => {
        const r = parseConfigText(t);
        return r.ok ? null : r.issues[0].message;
      },
    });
    expect(w).toMatchObject({ ok: false, code: 'CONFIG_EDIT' });
    expect(readFileSync(file, 'utf8')).toBe(DEMO);
    expect(existsSync(`${file}.bak`)).toBe(false);
  });
});
