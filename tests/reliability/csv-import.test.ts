/**
 * CSV import all-or-nothing. Property: a file of valid rows with malformed lines at random places
 * (bad time, bad value, unclosed quote, missing column, local time without offset, binary junk)
 * is refused as a whole — every bad line named by its line number, the store exactly as before
 * (also with --replace). And a `radcast import` of a large file killed with SIGKILL in the middle
 * of its transaction leaves either all of the rows or none of them, in a file that passes
 * PRAGMA integrity_check.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { spawn } from 'node:child_process';
import { existsSync, mkdtempSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import Database from 'better-sqlite3';
import { runCli } from '../../src/cli/main.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';

const BIN = resolve(import.meta.dirname, '../../bin/radcast.mjs');
const H = 3_600_000;
const T0 = Date.UTC(2025, 10, 3);
let dir: string;
beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-csv-'));
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

async function cli(args: string[]) {
  let out = '';
  let err = '';
  const code = await runCli(args, { out: (s) => void (out += s), err: (s) => void (err += s) }, {}, dir);
  return { code, out, err };
}

const iso = (t: number) => new Date(t).toISOString().replace('.000Z', '+00:00');
const BAD_LINES: Array<{ line: string; code: string }> = [
  { line: '2025-11-03T05:00:00+01:00,12O.5', code: 'CSV_VALUE' },
  { line: 'yesterday,100', code: 'CSV_TIME' },
  { line: '2025-11-03T05:00:00,100', code: 'CSV_TIME' }, // local time without offset
  { line: '"2025-11-03T05:00:00+01:00,100', code: 'CSV_QUOTE' },
  { line: '2025-11-03T05:00:00+01:00', code: 'CSV_COLUMNS' },
  { line: '2025-02-30T05:00:00+01:00,100', code: 'CSV_TIME' },
  { line: '2025-11-03T05:00:00+01:00,1e999', code: 'CSV_VALUE' },
  { line: '\u0000\u0001\u0002,\u00ff', code: 'CSV_TIME' },
];

async function readAll(db: string, series: string) {
  const s = new EmbeddedStore({ path: db });
  try {
    return await s.readReadings({ name: series }, 0, Date.UTC(2100, 0));
  } finally {
    await s.close();
  }
}

describe('CSV import is all or nothing', () => {
  it('malformed lines anywhere: refused whole, each bad line named by number, the store unchanged (property)', async () => {
    const db = join(dir, 'prop.db');
    // Readings already in the store that a failed import must leave alone.
    const before = Array.from({ length: 48 }, (_, i) => ({ t: T0 - (48 - i) * H, v: 500 + i }));
    const seedStore = new EmbeddedStore({ path: db });
    seedStore.writeReadings('oskaveld-north', before);
    await seedStore.close();
    let n = 0;
    await fc.assert(
      fc.asyncProperty(
        fc.integer({ min: 1, max: 60 }),
        fc.array(fc.record({ at: fc.nat(), bad: fc.constantFrom(...BAD_LINES) }), { minLength: 1, maxLength: 4 }),
        fc.boolean(),
        fc.boolean(),
        async (rows, inserts, header, replace) => {
          const lines = Array.from({ length: rows }, (_, i) => `${iso(T0 + i * H)},${(400 + i * 0.5).toFixed(2)}`);
          for (const ins of inserts) lines.splice(ins.at % (lines.length + 1), 0, ins.bad.line);
          if (header) lines.unshift('timestamp,value');
          const file = join(dir, `p${n++}.csv`);
          writeFileSync(file, lines.join('\n') + '\n');
          const r = await cli(['import', file, '--series', 'oskaveld-north', '--db', db, ...(replace ? ['--replace'] : [])]);
          expect(r.code).toBe(2);
          expect(r.out).toBe('');
          expect(r.err).toContain('nothing was imported');
          // Every bad line is named with its code and its 1-based line number.
          for (const ins of inserts) {
            const lineNo = lines.indexOf(ins.bad.line) + 1;
            expect(r.err, `line ${lineNo}: ${ins.bad.line}`).toContain(`${ins.bad.code} line ${lineNo}:`);
          }
          expect(await readAll(db, 'oskaveld-north')).toEqual(before);
        },
      ),
      { numRuns: 60, seed: 42 },
    );
  });

  it('killed with SIGKILL in the middle of the transaction: all rows or none, file intact', async () => {
    const db = join(dir, 'kill.db');
    const pre = new EmbeddedStore({ path: db });
    pre.writeReadings('brennick-yard', [{ t: T0, v: 1 }]);
    await pre.close();
    const nRows = 400_000;
    const csv = join(dir, 'big.csv');
    const body: string[] = ['timestamp,value'];
    for (let i = 0; i < nRows; i++) body.push(`${T0 + (i + 1) * 60_000},${(i % 997) / 10}`);
    writeFileSync(csv, body.join('\n') + '\n');
    const outcomes: Array<{ rows: number; reportedDone: boolean; walGrew: boolean }> = [];
    // Kill at several points: while the file is parsed, and once the transaction has started
    // writing (the WAL grows past its header).
    for (const waitForWal of [false, true]) {
      const child = spawn(process.execPath, [BIN, 'import', csv, '--series', 'tarrow-hill', '--db', db, '--replace'], { stdio: ['ignore', 'pipe', 'pipe'] });
      let out = '';
      child.stdout.on('data', (d) => (out += String(d)));
      const exited = new Promise<string | null>((r) => child.once('exit', (_c, sig) => r(sig)));
      const wal = `${db}-wal`;
      const t0 = Date.now();
      const walStart = existsSync(wal) ? statSync(wal).size : 0;
      let grown = false;
      for (;;) {
        grown = existsSync(wal) && statSync(wal).size > walStart + 64 * 1024;
        if ((waitForWal && grown) || (!waitForWal && Date.now() - t0 > 1500) || Date.now() - t0 > 60_000 || out.includes('imported')) break;
        await new Promise((r) => setTimeout(r, 2));
      }
      child.kill('SIGKILL');
      const sig = await exited;
      const raw = new Database(db);
      // A sound file answers the single row "ok" (SQLite documentation of PRAGMA integrity_check).
      expect(raw.pragma('integrity_check', { simple: true })).toBe('ok');
      raw.close();
      const n = (await readAll(db, 'tarrow-hill')).length;
      expect([0, nRows], `killed (${sig}) after ${Date.now() - t0} ms; output ${out}`).toContain(n);
      expect(await readAll(db, 'brennick-yard')).toEqual([{ t: T0, v: 1 }]);
      if (out.includes('imported')) expect(n).toBe(nRows);
      outcomes.push({ rows: n, reportedDone: out.includes('imported'), walGrew: grown });
    }
    // At least one kill came before the import finished (else nothing was tested), and the one
    // that waited for the WAL found the transaction writing.
    expect(outcomes.some((o) => !o.reportedDone), JSON.stringify(outcomes)).toBe(true);
    expect(outcomes[1].walGrew || outcomes[1].reportedDone, JSON.stringify(outcomes)).toBe(true);
  }, 120_000);
});
