/**
 * What every command gets besides its options: where to write, the environment, the working
 * directory and a way to set the exit code. Tests pass capturing writers; the real CLI passes
 * process.stdout / process.stderr.
 */
import { resolve } from 'node:path';
import type { Command } from 'commander';
import { formatIssue, type ConfigIssue } from '../config/errors.ts';
import { loadConfigFile, type LoadedConfig } from '../config/load.ts';

export interface CliIo {
  out(text: string): void;
  err(text: string): void;
}

export interface CliContext {
  io: CliIo;
  env: Record<string, string | undefined>;
  cwd: string;
  /** The exit code the process ends with (highest severity wins). */
  exitCode: number;
  fail(code: number): void;
}

/** Exit codes: 0 ok, 1 the job failed (some series or rows), 2 bad input (config, CSV, usage). */
export const EXIT = { OK: 0, FAILED: 1, INVALID: 2 } as const;

export function createContext(io?: Partial<CliIo>, env: Record<string, string | undefined> = process.env, cwd = process.cwd()): CliContext {
  const ctx: CliContext = {
    io: {
      out: io?.out ?? ((t) => void process.stdout.write(t)),
      err: io?.err ?? ((t) => void process.stderr.write(t)),
    },
    env,
    cwd,
    exitCode: 0,
    fail(code: number) {
      ctx.exitCode = Math.max(ctx.exitCode, code);
    },
  };
  return ctx;
}

/** Commands registered by other modules may be called without a context; they get the process one. */
let processContext: CliContext | undefined;
export function defaultContext(): CliContext {
  processContext ??= createContext();
  return processContext;
}
export function setDefaultContext(ctx: CliContext): void {
  processContext = ctx;
}

/** Prints config issues, one per line, to stderr. */
export function printIssues(ctx: CliContext, file: string, issues: ConfigIssue[]): void {
  ctx.io.err(`config ${file}: ${issues.length} issue(s)\n`);
  for (const i of issues) ctx.io.err(`  ${formatIssue(i)}\n`);
}

/** Loads --config, printing every issue and setting exit code 2 on failure. */
export function loadConfigForCli(ctx: CliContext, file: string): LoadedConfig | null {
  const r = loadConfigFile(resolve(ctx.cwd, file));
  if (!r.ok) {
    printIssues(ctx, file, r.issues);
    ctx.fail(EXIT.INVALID);
    return null;
  }
  return r.value;
}

/** Type of the registration functions command modules export. */
export type RegisterCommand = (program: Command, ctx?: CliContext) => void;
