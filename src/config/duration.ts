/**
 * Parsing of the small value languages the config uses: durations ("15m", "1h30m", "8w"),
 * durations-or-steps (a bare integer counts steps) and lag lists ("1-24", 168, "1w").
 * Pure; every failure is a value with a hint, never an exception.
 */

/** Milliseconds per duration unit. Months and years are left out on purpose: their length varies. */
export const DURATION_UNIT_MS: Readonly<Record<string, number>> = {
  ms: 1,
  s: 1_000,
  m: 60_000,
  h: 3_600_000,
  d: 86_400_000,
  w: 604_800_000,
};

/** One or more `<integer><unit>` parts, e.g. "90s", "1h30m", "2w". */
export const DURATION_PATTERN = /^(\d+(ms|s|m|h|d|w))+$/;
const PART = /(\d+)(ms|s|m|h|d|w)/g;

export type Parsed<T> = { ok: true; value: T } | { ok: false; message: string; hint: string };

/** "1h30m" -> 5_400_000. */
export function parseDurationMs(text: string): Parsed<number> {
  const s = text.trim();
  if (!DURATION_PATTERN.test(s)) {
    return {
      ok: false,
      message: `"${text}" is not a duration`,
      hint: 'write an integer followed by a unit (ms, s, m, h, d, w), e.g. "15m", "1h30m", "8w"',
    };
  }
  let total = 0;
  for (const m of s.matchAll(PART)) total += Number(m[1]) * DURATION_UNIT_MS[m[2]];
  if (total <= 0) return { ok: false, message: `"${text}" is zero`, hint: 'use a positive duration' };
  return { ok: true, value: total };
}

/** Formats ms as the shortest exact duration string ("1d", "90m", "1h30m"). */
export function formatDurationMs(ms: number): string {
  if (!Number.isFinite(ms) || ms <= 0) return String(ms);
  const units: [string, number][] = [['w', 604_800_000], ['d', 86_400_000], ['h', 3_600_000], ['m', 60_000], ['s', 1_000], ['ms', 1]];
  let rest = Math.round(ms);
  let out = '';
  for (const [u, size] of units) {
    const n = Math.floor(rest / size);
    if (n > 0) {
      out += `${n}${u}`;
      rest -= n * size;
    }
  }
  return out;
}

/**
 * A length given either as a whole number of steps (a bare integer) or as a duration that must be
 * a whole multiple of the step. `what` names the option in messages.
 */
export function toSteps(value: number | string, stepMs: number, what: string): Parsed<number> {
  if (typeof value === 'number') {
    if (!Number.isInteger(value) || value < 0) {
      return { ok: false, message: `${what} of ${value} steps is not a whole non-negative number`, hint: 'give a whole number of steps or a duration like "1d"' };
    }
    return { ok: true, value };
  }
  const d = parseDurationMs(value);
  if (!d.ok) return d;
  if (d.value % stepMs !== 0) {
    return {
      ok: false,
      message: `${what} "${value}" is not a whole number of steps of ${formatDurationMs(stepMs)}`,
      hint: `use a multiple of the step, e.g. "${formatDurationMs(Math.max(1, Math.round(d.value / stepMs)) * stepMs)}"`,
    };
  }
  return { ok: true, value: d.value / stepMs };
}

/** Lag list entry as written: 24, "1-24", "1w" (duration, converted with the step). */
export type LagSpec = number | string;

const RANGE = /^(\d+)\s*-\s*(\d+)$/;

/**
 * Expands a lag list into sorted, distinct steps >= 1. Entries may be integers, inclusive ranges
 * "a-b", comma-separated strings ("1-24, 48, 168") or durations ("1w").
 */
export function expandLags(specs: readonly LagSpec[], stepMs: number): Parsed<number[]> {
  const out = new Set<number>();
  const pieces: (number | string)[] = [];
  for (const s of specs) {
    if (typeof s === 'string' && s.includes(',')) pieces.push(...s.split(',').map((p) => p.trim()).filter((p) => p !== ''));
    else pieces.push(typeof s === 'string' ? s.trim() : s);
  }
  for (const p of pieces) {
    if (typeof p === 'number' || /^\d+$/.test(p)) {
      const n = Number(p);
      if (!Number.isInteger(n) || n < 1) return { ok: false, message: `lag ${p} is not a whole number >= 1`, hint: 'lag 1 is the last value observed at the forecast origin' };
      out.add(n);
      continue;
    }
    const r = RANGE.exec(p);
    if (r) {
      const a = Number(r[1]);
      const b = Number(r[2]);
      if (a < 1 || b < a) return { ok: false, message: `lag range "${p}" is empty or starts below 1`, hint: 'write ranges low-high with low >= 1, e.g. "1-24"' };
      if (b - a > 100_000) return { ok: false, message: `lag range "${p}" is too long`, hint: 'a lag range may span at most 100000 steps' };
      for (let i = a; i <= b; i++) out.add(i);
      continue;
    }
    const d = toSteps(p, stepMs, `lag`);
    if (!d.ok) {
      return { ok: false, message: `lag "${p}" is neither a step count, a range "a-b" nor a duration`, hint: 'examples: 24, "1-24", "1w"' };
    }
    if (d.value < 1) return { ok: false, message: `lag "${p}" is shorter than one step`, hint: 'lags are at least one step' };
    out.add(d.value);
  }
  if (out.size === 0) return { ok: false, message: 'the lag list is empty', hint: 'give at least one lag, e.g. ["1-24"]' };
  return { ok: true, value: [...out].sort((x, y) => x - y) };
}
