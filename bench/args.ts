/** Small helpers shared by the bench cases: command-line flags and medians. */

/** The value after `name` in argv (undefined when the flag or its value is missing). */
export function flagValue(argv: readonly string[], name: string): string | undefined {
  const i = argv.indexOf(name);
  return i >= 0 ? argv[i + 1] : undefined;
}

/** A numeric flag, or `dflt` when it is not given. */
export function numberFlag(argv: readonly string[], name: string, dflt: number): number {
  const v = flagValue(argv, name);
  return v === undefined ? dflt : Number(v);
}

/** A text flag, or `dflt` when it is not given. */
export function stringFlag(argv: readonly string[], name: string, dflt: string): string {
  return flagValue(argv, name) ?? dflt;
}

/** Median (upper middle for an even count). */
export function median(v: readonly number[]): number {
  const s = [...v].sort((a, b) => a - b);
  return s[Math.floor(s.length / 2)];
}
