/**
 * The radcast command line. Each command lives in its own module exporting `registerX(program,
 * ctx)`; this file only builds the program and registers them. Commands owned by other parts
 * (run / once / demo, backtest, tune) are loaded when their module exists, so the CLI works
 * while they are being built; a module that exists but fails to load is reported, not hidden.
 */
import { existsSync, realpathSync } from 'node:fs';
import { basename } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Command, CommanderError } from 'commander';
import { createContext, setDefaultContext, type CliContext, type CliIo, type RegisterCommand } from './context.ts';
import { registerCheck } from './check.ts';
import { registerImport } from './import.ts';
import { registerExport } from './export.ts';
import { registerDocs } from './docs.ts';

/** Modules of commands owned elsewhere; every `register*` function they export is called. */
export const OPTIONAL_COMMAND_MODULES = ['./run.ts', './once.ts', './demo.ts', './backtest.ts', './tune.ts'] as const;

export async function buildProgram(ctx: CliContext): Promise<Command> {
  setDefaultContext(ctx);
  const program = new Command('radcast')
    .description('Next-day forecasts from RBF networks refitted on a rolling window, written back to the time-series store.')
    .version('0.1.0', '-V, --version')
    .showHelpAfterError()
    .exitOverride()
    .configureOutput({ writeOut: (s) => ctx.io.out(s), writeErr: (s) => ctx.io.err(s) });
  registerCheck(program, ctx);
  registerImport(program, ctx);
  registerExport(program, ctx);
  registerDocs(program, ctx);
  for (const mod of OPTIONAL_COMMAND_MODULES) {
    const url = new URL(mod, import.meta.url);
    if (!existsSync(fileURLToPath(url))) continue;
    try {
      const m = (await import(url.href)) as Record<string, unknown>;
      for (const [name, fn] of Object.entries(m)) {
        if (name.startsWith('register') && typeof fn === 'function') (fn as RegisterCommand)(program, ctx);
      }
    } catch (e) {
      ctx.io.err(`radcast: commands of ${mod} could not be loaded: ${(e as Error).message}\n`);
    }
  }
  // Subcommands print through the same writers and never exit the process themselves.
  for (const c of program.commands) c.exitOverride().configureOutput({ writeOut: (s) => ctx.io.out(s), writeErr: (s) => ctx.io.err(s) });
  return program;
}

/** Runs the CLI on `argv` (without node and script) and returns the exit code. */
export async function runCli(argv: string[], io?: Partial<CliIo>, env: Record<string, string | undefined> = process.env, cwd = process.cwd()): Promise<number> {
  const ctx = createContext(io, env, cwd);
  const program = await buildProgram(ctx);
  if (argv.length === 0) {
    program.outputHelp();
    return 0;
  }
  try {
    await program.parseAsync(argv, { from: 'user' });
  } catch (e) {
    if (e instanceof CommanderError) {
      // --help and --version end here with code 0.
      return e.exitCode === 0 ? ctx.exitCode : 2;
    }
    const err = e as { code?: string; message?: string; hint?: string };
    ctx.io.err(`${err.code ?? 'INTERNAL'}: ${err.message ?? String(e)}${err.hint ? ` (hint: ${err.hint})` : ''}\n`);
    return Math.max(ctx.exitCode, 1);
  }
  return ctx.exitCode;
}

function isEntry(): boolean {
  const arg = process.argv[1];
  if (!arg) return false;
  let real = arg;
  try {
    real = realpathSync(arg);
  } catch {
    /* not a file path */
  }
  return real === fileURLToPath(import.meta.url) || basename(real) === 'radcast.mjs' || basename(real) === 'radcast';
}

if (isEntry()) {
  const code = await runCli(process.argv.slice(2));
  process.exitCode = code;
}
