/**
 * `radcast docs`: prints the config reference generated from the schema (the same text as
 * docs/config-reference.md); --check FILE exits 1 when that file is stale.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { resolve } from 'node:path';
import type { Command } from 'commander';
import { renderConfigReference } from '../config/doc.ts';
import { defaultContext, EXIT, type CliContext } from './context.ts';

export function registerDocs(program: Command, ctx: CliContext = defaultContext()): void {
  program
    .command('docs')
    .description('print the config reference generated from the schema')
    .option('-o, --out <file>', 'write it to a file')
    .option('--check <file>', 'exit 1 when FILE differs from the generated reference')
    .action((opts: { out?: string; check?: string }) => {
      const text = renderConfigReference();
      if (opts.check) {
        let current = '';
        try {
          current = readFileSync(resolve(ctx.cwd, opts.check), 'utf8');
        } catch {
          /* missing = stale */
        }
        if (current !== text) {
          ctx.io.err(`${opts.check} is stale; regenerate it with: radcast docs --out ${opts.check}\n`);
          ctx.fail(EXIT.FAILED);
        } else ctx.io.out(`${opts.check} is up to date\n`);
        return;
      }
      if (opts.out) {
        writeFileSync(resolve(ctx.cwd, opts.out), text);
        ctx.io.out(`wrote ${opts.out}\n`);
      } else ctx.io.out(text);
    });
}
