/**
 * `radcast import FILE.csv --series NAME [--config FILE | --db FILE]`: loads readings into the
 * embedded store. The whole file is checked first and written in one transaction: any bad line
 * means nothing is written, and every bad line is named.
 */
import { readFileSync } from 'node:fs';
import { resolve } from 'node:path';
import type { Command } from 'commander';
import { EmbeddedStore } from '../store/embedded.ts';
import { parseReadingsCsv } from './csv.ts';
import { defaultContext, EXIT, loadConfigForCli, type CliContext } from './context.ts';

/** The embedded store file named by --db or by the config's store section; null after printing why not. */
export function embeddedPathFor(ctx: CliContext, opts: { config?: string; db?: string }, verb: string): string | null {
  if (opts.db) return resolve(ctx.cwd, opts.db);
  if (!opts.config) {
    ctx.io.err(`USAGE: ${verb} needs --config FILE or --db FILE (the embedded store file)\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  const loaded = loadConfigForCli(ctx, opts.config);
  if (!loaded) return null;
  if (loaded.config.store.kind !== 'embedded') {
    ctx.io.err(`STORE_KIND: ${verb} works on the embedded store; ${opts.config} uses store.kind ${loaded.config.store.kind} (hint: write readings to InfluxDB with its own tools, or pass --db FILE)\n`);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  return loaded.config.store.embedded.path;
}

const iso = (ms: number) => new Date(ms).toISOString();

export function registerImport(program: Command, ctx: CliContext = defaultContext()): void {
  program
    .command('import')
    .description('load readings from a CSV file (timestamp and value columns) into the embedded store')
    .argument('<file>', 'CSV file; ISO-8601 times with offset or epoch seconds/milliseconds')
    .requiredOption('-s, --series <name>', 'series the readings belong to')
    .option('-c, --config <file>', 'config file whose embedded store receives the readings')
    .option('--db <file>', 'embedded store file (instead of --config)')
    .option('--time-column <col>', 'time column: header name or 1-based index')
    .option('--value-column <col>', 'value column: header name or 1-based index')
    .option('--epoch <unit>', 'bare numbers as times: auto, s or ms', 'auto')
    .option('--replace', 'delete the series\' existing readings first (in the same transaction)')
    .action((file: string, opts: { series: string; config?: string; db?: string; timeColumn?: string; valueColumn?: string; epoch: string; replace?: boolean }) => {
      if (!['auto', 's', 'ms'].includes(opts.epoch)) {
        ctx.io.err(`USAGE: --epoch must be auto, s or ms, not "${opts.epoch}"\n`);
        ctx.fail(EXIT.INVALID);
        return;
      }
      const path = resolve(ctx.cwd, file);
      let text: string;
      try {
        text = readFileSync(path, 'utf8');
      } catch (e) {
        ctx.io.err(`CSV_READ: cannot read ${path} (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})\n`);
        ctx.fail(EXIT.INVALID);
        return;
      }
      const parsed = parseReadingsCsv(text, { timeColumn: opts.timeColumn, valueColumn: opts.valueColumn, epoch: opts.epoch as 'auto' | 's' | 'ms' });
      if (parsed.issueCount > 0) {
        ctx.io.err(`${file}: ${parsed.issueCount} bad line(s); nothing was imported\n`);
        for (const i of parsed.issues) ctx.io.err(`  ${i.code} line ${i.line}: ${i.message} (hint: ${i.hint})\n`);
        if (parsed.issueCount > parsed.issues.length) ctx.io.err(`  ... and ${parsed.issueCount - parsed.issues.length} more\n`);
        ctx.fail(EXIT.INVALID);
        return;
      }
      const dbPath = embeddedPathFor(ctx, opts, 'import');
      if (!dbPath) return;
      const store = new EmbeddedStore({ path: dbPath });
      try {
        let removed = 0;
        store.transaction(() => {
          if (opts.replace) removed = store.deleteReadings(opts.series);
          store.writeReadings(opts.series, parsed.readings);
        });
        const ts = parsed.readings.map((r) => r.t);
        const lo = ts.reduce((a, b) => Math.min(a, b), Infinity);
        const hi = ts.reduce((a, b) => Math.max(a, b), -Infinity);
        const extent = store.readingsExtent(opts.series);
        ctx.io.out(
          `imported ${parsed.readings.length} readings into ${opts.series} (${parsed.readings.length ? `${iso(lo)} .. ${iso(hi)}` : 'none'}) in ${dbPath}\n` +
            (parsed.duplicates ? `  ${parsed.duplicates} repeated timestamps: the last row of each was kept\n` : '') +
            (parsed.missing ? `  ${parsed.missing} empty values stored as missing\n` : '') +
            (opts.replace ? `  ${removed} earlier readings replaced\n` : '') +
            `  the series now holds ${extent?.count ?? 0} readings\n`,
        );
      } finally {
        void store.close();
      }
    });
}
