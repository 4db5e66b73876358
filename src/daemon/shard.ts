/**
 * Sharding: which series this instance owns when N instances share one fleet of series.
 *
 * shard(name, N) = jumpConsistentHash(fnv1a64(utf8(name)), N)
 *
 *  - FNV-1a, 64-bit (offset basis 0xcbf29ce484222325, prime 0x100000001b3) over the UTF-8 bytes of
 *    the series name: stable across processes, machines and Node versions (no per-process seed,
 *    unlike a runtime's own string hash), and cheap.
 *  - Jump consistent hash (Lamping & Veach, "A Fast, Minimal Memory, Consistent Hash Algorithm",
 *    2014) maps the 64-bit key to a bucket in [0, N). Chosen over `hash % N` because going from N to
 *    N + 1 shards moves only ~1/(N + 1) of the series (each to the new shard), so most series keep
 *    their warm-start model, which lives in the owning instance's local state.
 *
 * An instance's shard comes from, in this order: the `--shard I/N` option, the environment
 * variable RADCAST_SHARD=I/N, or RADCAST_SHARD_FROM_HOSTNAME=1 with RADCAST_SHARDS=N (the index is
 * the trailing ordinal of the host name, as Kubernetes StatefulSet pods are named `radcast-3`).
 * With none of them the instance owns every series (shard 0/1). I is 0-based, 0 <= I < N.
 */
import os from 'node:os';

/** Largest shard count accepted (well inside jump hash's int32 bucket range). */
export const MAX_SHARDS = 65_536;

/** Where a shard assignment came from (for the start-up log line and /readyz). */
export type ShardSource = 'option' | 'env' | 'hostname' | 'default';

export interface ShardSpec {
  /** 0-based index of this instance, 0 <= index < count. */
  index: number;
  /** Number of instances sharing the fleet. */
  count: number;
  source: ShardSource;
}

export type ShardErrorCode =
  | 'SHARD_BAD_FORMAT'
  | 'SHARD_COUNT_INVALID'
  | 'SHARD_INDEX_OUT_OF_RANGE'
  | 'SHARD_HOSTNAME_NO_ORDINAL'
  | 'SHARD_COUNT_MISSING'
  | 'SHARD_INCOMPLETE';

/** A bad shard setting, as a value: code, the key it came from, the offending input and a fix. */
export interface ShardError {
  code: ShardErrorCode;
  /** Option or environment variable that held the bad value, e.g. "--shard" or "RADCAST_SHARD". */
  key: string;
  input: string;
  message: string;
  hint: string;
}

export type ShardResult = { ok: true; shard: ShardSpec } | { ok: false; error: ShardError };

/** Thrown form of a ShardError, for callers that prefer exceptions (the CLI). */
export class ShardConfigError extends Error {
  readonly code: ShardErrorCode;
  readonly detail: ShardError;
  constructor(detail: ShardError) {
    super(formatShardError(detail));
    this.name = 'ShardConfigError';
    this.code = detail.code;
    this.detail = detail;
  }
}

/** One line: `SHARD_INDEX_OUT_OF_RANGE --shard="2/2": ... (hint: ...)`. */
export function formatShardError(e: ShardError): string {
  return `${e.code} ${e.key}=${JSON.stringify(e.input)}: ${e.message} (hint: ${e.hint})`;
}

export const ALL_SERIES: ShardSpec = Object.freeze({ index: 0, count: 1, source: 'default' }) as ShardSpec;

const MASK64 = (1n << 64n) - 1n;
const FNV64_OFFSET = 0xcbf29ce484222325n;
const FNV64_PRIME = 0x100000001b3n;
const encoder = new TextEncoder();

/** FNV-1a 64-bit of the UTF-8 bytes of `text`: h = (h XOR byte) * prime mod 2^64. */
export function fnv1a64(text: string): bigint {
  let h = FNV64_OFFSET;
  for (const byte of encoder.encode(text)) {
    h = ((h ^ BigInt(byte)) * FNV64_PRIME) & MASK64;
  }
  return h;
}

const JUMP_LCG = 2862933555777941757n;
const TWO_POW_31 = 2147483648;

/**
 * Jump consistent hash: bucket in [0, nBuckets) for a 64-bit key (Lamping & Veach 2014, Fig. 1):
 * key = key * 2862933555777941757 + 1; j = floor((b + 1) * 2^31 / ((key >>> 33) + 1)).
 */
export function jumpHash(key: bigint, nBuckets: number): number {
  if (!Number.isInteger(nBuckets) || nBuckets < 1) throw new RangeError(`jumpHash: nBuckets must be an integer >= 1, got ${nBuckets}`);
  let k = key & MASK64;
  let b = -1;
  let j = 0;
  while (j < nBuckets) {
    b = j;
    k = (k * JUMP_LCG + 1n) & MASK64;
    j = Math.floor((b + 1) * (TWO_POW_31 / (Number(k >> 33n) + 1)));
  }
  return b;
}

/** The shard (0-based) that owns the series `name` when the fleet is split into `count` shards. */
export function shardOf(name: string, count: number): number {
  if (count === 1) return 0;
  return jumpHash(fnv1a64(name), count);
}

/** True when the instance with shard `spec` owns the series `name`. */
export function ownsSeries(spec: ShardSpec, name: string): boolean {
  return spec.count === 1 || shardOf(name, spec.count) === spec.index;
}

/** Keeps the items this shard owns; `nameOf` gives each item's series name (the hash key). */
export function filterOwned<T>(spec: ShardSpec, items: readonly T[], nameOf: (item: T) => string): T[] {
  if (spec.count === 1) return items.slice();
  return items.filter((item) => ownsSeries(spec, nameOf(item)));
}

/** "0/1" style label for logs and metrics. */
export function shardLabel(spec: ShardSpec): string {
  return `${spec.index}/${spec.count}`;
}

function fail(code: ShardErrorCode, key: string, input: string, message: string, hint: string): ShardResult {
  return { ok: false, error: { code, key, input, message, hint } };
}

function checkCount(count: number, key: string, input: string): ShardResult | null {
  if (!Number.isSafeInteger(count) || count < 1 || count > MAX_SHARDS) {
    return fail('SHARD_COUNT_INVALID', key, input, `shard count must be an integer from 1 to ${MAX_SHARDS}`, 'N is the number of instances sharing the series, e.g. 0/4 for the first of four');
  }
  return null;
}

function checkIndex(index: number, count: number, key: string, input: string, hint?: string): ShardResult | null {
  if (!Number.isSafeInteger(index) || index < 0 || index >= count) {
    const oneBased = index === count && count > 1;
    return fail(
      'SHARD_INDEX_OUT_OF_RANGE',
      key,
      input,
      `shard index ${index} is outside 0..${count - 1}`,
      hint ?? (oneBased ? `the index is 0-based: the shards of ${count} are 0/${count} .. ${count - 1}/${count}` : `use an index from 0 to ${count - 1}`),
    );
  }
  return null;
}

/** Parses "I/N" (0-based I, 0 <= I < N <= MAX_SHARDS). `key` names the option or variable in errors. */
export function parseShard(text: string, key = '--shard', source: ShardSource = 'option'): ShardResult {
  const m = /^\s*(\d+)\s*\/\s*(\d+)\s*$/.exec(text);
  if (!m) {
    return fail('SHARD_BAD_FORMAT', key, text, 'expected I/N: this instance\'s 0-based index, a slash, the number of instances', 'for example --shard 0/2 on one machine and --shard 1/2 on the other');
  }
  const index = Number(m[1]);
  const count = Number(m[2]);
  return checkCount(count, key, text) ?? checkIndex(index, count, key, text) ?? { ok: true, shard: { index, count, source } };
}

/** Trailing ordinal of a StatefulSet pod name: "radcast-3" -> 3; null when there is none. */
export function hostnameOrdinal(hostname: string): number | null {
  const m = /-(\d+)$/.exec(hostname.trim().split('.')[0] ?? '');
  return m ? Number(m[1]) : null;
}

const TRUE_WORDS = new Set(['1', 'true', 'yes', 'on']);
const FALSE_WORDS = new Set(['', '0', 'false', 'no', 'off']);

export interface ResolveShardInput {
  /** Value of the --shard option, if given. */
  option?: string;
  /** Environment (defaults to process.env). */
  env?: Record<string, string | undefined>;
  /** Host name source (defaults to $HOSTNAME, then os.hostname()). */
  hostname?: () => string;
}

/**
 * The shard this instance runs as: --shard, else RADCAST_SHARD, else RADCAST_SHARD_FROM_HOSTNAME=1
 * with RADCAST_SHARDS=N, else all series. A set-but-broken setting is an error, never "all series":
 * silently owning everything would forecast the shared series twice.
 */
export function resolveShard(input: ResolveShardInput = {}): ShardResult {
  const env = input.env ?? process.env;
  if (input.option !== undefined) return parseShard(input.option, '--shard', 'option');
  const shardEnv = env.RADCAST_SHARD;
  if (shardEnv !== undefined && shardEnv.trim() !== '') return parseShard(shardEnv, 'RADCAST_SHARD', 'env');

  const fromHost = (env.RADCAST_SHARD_FROM_HOSTNAME ?? '').trim().toLowerCase();
  const countText = (env.RADCAST_SHARDS ?? '').trim();
  if (!TRUE_WORDS.has(fromHost) && !FALSE_WORDS.has(fromHost)) {
    return fail('SHARD_BAD_FORMAT', 'RADCAST_SHARD_FROM_HOSTNAME', env.RADCAST_SHARD_FROM_HOSTNAME ?? '', 'expected 1/true/yes/on or 0/false/no/off', 'set RADCAST_SHARD_FROM_HOSTNAME=1 to take the shard index from the pod ordinal');
  }
  if (TRUE_WORDS.has(fromHost)) {
    if (countText === '') {
      return fail('SHARD_COUNT_MISSING', 'RADCAST_SHARDS', '', 'RADCAST_SHARD_FROM_HOSTNAME is on but the number of shards is not set', 'set RADCAST_SHARDS to the StatefulSet replica count');
    }
    if (!/^\d+$/.test(countText)) {
      return fail('SHARD_COUNT_INVALID', 'RADCAST_SHARDS', countText, 'expected a whole number of shards', 'set RADCAST_SHARDS to the StatefulSet replica count, e.g. 3');
    }
    const count = Number(countText);
    const bad = checkCount(count, 'RADCAST_SHARDS', countText);
    if (bad) return bad;
    const host = (input.hostname ?? (() => env.HOSTNAME || os.hostname()))();
    const ordinal = hostnameOrdinal(host);
    if (ordinal === null) {
      return fail('SHARD_HOSTNAME_NO_ORDINAL', 'hostname', host, 'the host name does not end in -<number>', 'run as a StatefulSet pod (named like radcast-0) or set RADCAST_SHARD=I/N instead');
    }
    return (
      checkIndex(ordinal, count, 'hostname', host, `pod ordinal ${ordinal} needs RADCAST_SHARDS > ${ordinal}: keep RADCAST_SHARDS equal to the StatefulSet replicas`) ?? {
        ok: true,
        shard: { index: ordinal, count, source: 'hostname' },
      }
    );
  }
  if (countText !== '') {
    return fail('SHARD_INCOMPLETE', 'RADCAST_SHARDS', countText, 'RADCAST_SHARDS is set but nothing says which shard this instance is', 'also set RADCAST_SHARD_FROM_HOSTNAME=1 (StatefulSet) or use RADCAST_SHARD=I/N');
  }
  return { ok: true, shard: { ...ALL_SERIES } };
}

/** resolveShard, throwing a ShardConfigError on a bad setting. */
export function resolveShardOrThrow(input: ResolveShardInput = {}): ShardSpec {
  const r = resolveShard(input);
  if (!r.ok) throw new ShardConfigError(r.error);
  return r.shard;
}

/** The parts of a resolved series that decide its shard key. */
export interface ShardKeyInput {
  name: string;
  exogenous: readonly { name: string; atTarget: boolean; configured: boolean }[];
}

/**
 * Hash key per series name. A series that uses another configured series' forecast as an input
 * (exogenous with atTarget) must run on the same instance as that series, because the forecast
 * it needs is read from the instance's own state. So series linked by such inputs form a group
 * (union-find over the links) and every member is keyed by the group's smallest name; all other
 * series are keyed by their own name.
 */
export function shardKeys(series: readonly ShardKeyInput[]): Map<string, string> {
  const parent = new Map<string, string>(series.map((s) => [s.name, s.name]));
  const find = (x: string): string => {
    let r = x;
    while (parent.get(r) !== r) r = parent.get(r)!;
    // Path compression: point every node on the way at the root.
    for (let y = x; parent.get(y) !== r; ) {
      const next = parent.get(y)!;
      parent.set(y, r);
      y = next;
    }
    return r;
  };
  for (const s of series) {
    for (const e of s.exogenous) {
      if (!e.atTarget || !e.configured || !parent.has(e.name)) continue;
      const a = find(s.name);
      const b = find(e.name);
      if (a !== b) (a < b ? parent.set(b, a) : parent.set(a, b));
    }
  }
  return new Map(series.map((s) => [s.name, find(s.name)]));
}

/** The series of `all` this shard owns, keeping series linked by at-target inputs together. */
export function ownedSeries<T extends ShardKeyInput>(spec: ShardSpec, all: readonly T[]): T[] {
  if (spec.count === 1) return all.slice();
  const keys = shardKeys(all);
  return all.filter((s) => ownsSeries(spec, keys.get(s.name) ?? s.name));
}
