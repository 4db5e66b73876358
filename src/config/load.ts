/**
 * Loading the config: YAML text -> merge `defaults` into each series -> one zod parse -> the
 * combination checks of resolve.ts. A failure lists every issue with the key path that set the
 * offending value (a value inherited from `defaults` is reported at `defaults.*`).
 */
import { readFileSync } from 'node:fs';
import { dirname, isAbsolute, resolve as resolvePath } from 'node:path';
import { LineCounter, parseDocument, visit } from 'yaml';
import { z } from 'zod';
import { ConfigSchema, SeriesEntrySchema, type Config } from './schema.ts';
import { ConfigError, formatPath, type ConfigIssue, type ConfigIssueCode } from './errors.ts';
import { resolveAll, type RawIssue, type ResolvedSeries } from './resolve.ts';

export interface LoadedConfig {
  config: Config;
  series: ResolvedSeries[];
  /** Absolute path of the file, when loaded from one. */
  file?: string;
  /** Directory relative paths in the file were resolved against. */
  baseDir: string;
}

export type LoadResult = { ok: true; value: LoadedConfig } | { ok: false; issues: ConfigIssue[] };

export interface LoadOptions {
  /** Directory relative paths are resolved against (default: the file's directory, else cwd). */
  baseDir?: string;
  file?: string;
}

type Obj = Record<string, unknown>;
const isObj = (v: unknown): v is Obj => typeof v === 'object' && v !== null && !Array.isArray(v);

/** Deep merge for defaults: objects merge key by key, anything else (arrays, scalars, null) in `over` wins. */
export function mergeDefaults(base: unknown, over: unknown): unknown {
  if (!isObj(base) || !isObj(over)) return over === undefined ? base : over;
  const out: Obj = { ...base };
  for (const [k, v] of Object.entries(over)) out[k] = k in base ? mergeDefaults(base[k], v) : v;
  return out;
}

function has(obj: unknown, segs: readonly PropertyKey[]): boolean {
  let cur: unknown = obj;
  for (const s of segs) {
    if (Array.isArray(cur) && typeof s === 'number') {
      if (s >= cur.length) return false;
      cur = cur[s];
    } else if (isObj(cur) && typeof s === 'string' && Object.hasOwn(cur, s)) cur = cur[s];
    else return false;
  }
  return true;
}

// ---- hints from the schema's own doc lines ----

type JsonNode = { description?: string; properties?: Record<string, JsonNode>; items?: JsonNode; anyOf?: JsonNode[]; default?: unknown; enum?: unknown[]; unit?: string };
let jsonSchema: JsonNode | undefined;
function schemaDoc(): JsonNode {
  jsonSchema ??= z.toJSONSchema(ConfigSchema, { io: 'input', unrepresentable: 'any' }) as JsonNode;
  return jsonSchema;
}

/** The JSON-schema node of the option at a path (series entries and defaults share one shape). */
export function schemaNodeAt(segs: readonly PropertyKey[]): JsonNode | undefined {
  let node: JsonNode | undefined = schemaDoc();
  for (const s of segs) {
    if (!node) return undefined;
    const branches: JsonNode[] = node.anyOf ? node.anyOf : [node];
    let next: JsonNode | undefined;
    for (const b of branches) {
      if (typeof s === 'number' && b.items) next = b.items;
      else if (typeof s === 'string' && b.properties?.[s]) next = b.properties[s];
      if (next) break;
    }
    node = next;
  }
  return node;
}

function optionHint(segs: readonly PropertyKey[]): string {
  let n = schemaNodeAt(segs);
  // List items and union branches have no doc line of their own: use the option's.
  for (let k = segs.length - 1; (!n || !n.description) && k >= 0; k--) n = schemaNodeAt(segs.slice(0, k));
  if (!n) return '';
  const parts: string[] = [];
  if (n.description) parts.push(n.description.replace(/\.$/, ''));
  if (n.enum) parts.push(`one of: ${n.enum.join(', ')}`);
  if (n.default !== undefined) parts.push(`default: ${JSON.stringify(n.default)}`);
  return parts.join('; ');
}

function editDistance(a: string, b: string): number {
  const dp = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    let prev = dp[0];
    dp[0] = i;
    for (let j = 1; j <= b.length; j++) {
      const tmp = dp[j];
      dp[j] = Math.min(dp[j] + 1, dp[j - 1] + 1, prev + (a[i - 1].toLowerCase() === b[j - 1].toLowerCase() ? 0 : 1));
      prev = tmp;
    }
  }
  return dp[b.length];
}

function unknownKeyHint(objSegs: readonly PropertyKey[], key: string): string {
  const known = Object.keys(schemaNodeAt(objSegs)?.properties ?? {});
  let best = '';
  let bestD = Infinity;
  for (const k of known) {
    const d = editDistance(key, k);
    if (d < bestD) {
      bestD = d;
      best = k;
    }
  }
  if (bestD <= Math.max(2, Math.floor(key.length / 3))) return `did you mean "${best}"?`;
  return known.length ? `known keys here: ${known.join(', ')}` : 'remove it';
}

function preview(v: unknown): string {
  let s: string;
  try {
    s = typeof v === 'string' ? JSON.stringify(v) : JSON.stringify(v) ?? String(v);
  } catch {
    s = String(v);
  }
  return s.length > 60 ? s.slice(0, 57) + '...' : s;
}

/**
 * Maps a path in the merged config to the key in the file that set it: a series entry keeps its
 * own path; a value the entry did not set came from `defaults`.
 */
function origin(raw: Obj, segs: readonly PropertyKey[]): (string | number)[] {
  const s = segs as (string | number)[];
  if (s[0] === 'series' && typeof s[1] === 'number' && s.length > 2) {
    const entry = Array.isArray(raw.series) ? raw.series[s[1]] : undefined;
    const rest = s.slice(2);
    let inEntry = 0;
    let inDefaults = 0;
    for (let n = 1; n <= rest.length; n++) {
      if (has(entry, rest.slice(0, n))) inEntry = n;
      if (has(raw.defaults, rest.slice(0, n))) inDefaults = n;
    }
    if (inDefaults > inEntry) return ['defaults', ...rest];
  }
  return s;
}

function seriesNameAt(raw: Obj, segs: readonly (string | number)[]): string | undefined {
  if (segs[0] !== 'series' || typeof segs[1] !== 'number' || !Array.isArray(raw.series)) return undefined;
  const e = raw.series[segs[1]];
  return isObj(e) && typeof e.name === 'string' ? e.name : undefined;
}

function zodIssues(raw: Obj, merged: Obj, error: z.ZodError): ConfigIssue[] {
  const out: ConfigIssue[] = [];
  for (const iss of error.issues) {
    const segs = iss.path as (string | number)[];
    if (iss.code === 'unrecognized_keys') {
      for (const key of iss.keys) {
        const full = origin(raw, [...segs, key]);
        out.push({ code: 'CONFIG_UNKNOWN_KEY', path: formatPath(full), series: seriesNameAt(raw, segs), message: `unknown key "${key}"`, hint: unknownKeyHint(segs, key) });
      }
      continue;
    }
    const full = origin(raw, segs);
    let code: ConfigIssueCode = 'CONFIG_VALUE';
    let message = iss.message;
    if (iss.code === 'invalid_type') {
      code = 'CONFIG_TYPE';
      const got = has(merged, segs) ? preview((iss as { input?: unknown }).input) : 'nothing';
      message = has(merged, segs) ? `expected ${iss.expected}, got ${got}` : `required ${iss.expected} is missing`;
    } else if (iss.code === 'invalid_union') {
      code = 'CONFIG_TYPE';
      message = `${preview((iss as { input?: unknown }).input)} is not an accepted value`;
    } else if ('input' in iss && iss.input !== undefined && typeof iss.input !== 'object') {
      message = `${iss.message} (got ${preview(iss.input)})`;
    }
    out.push({ code, path: formatPath(full), series: seriesNameAt(raw, segs), message, hint: optionHint(segs) });
  }
  return out;
}

function dedupe(issues: ConfigIssue[]): ConfigIssue[] {
  const seen = new Set<string>();
  return issues.filter((i) => {
    const inherited = i.path.startsWith('defaults');
    const k = `${i.code}|${i.path}|${inherited ? '' : i.series ?? ''}|${inherited ? i.message.replace(/\d+/g, '#') : i.message}`;
    if (seen.has(k)) return false;
    seen.add(k);
    return true;
  }).map((i) => (i.path.startsWith('defaults') && i.code !== 'CONFIG_COMBINATION' ? { ...i, series: undefined } : i));
}

function absolutise(config: Config, baseDir: string): void {
  const abs = (p: string) => (p === ':memory:' || isAbsolute(p) ? p : resolvePath(baseDir, p));
  config.store.embedded.path = abs(config.store.embedded.path);
  config.state.path = abs(config.state.path);
  const ix = config.store.influxdb;
  if (ix?.tokenFile) ix.tokenFile = abs(ix.tokenFile);
  if (ix?.passwordFile) ix.passwordFile = abs(ix.passwordFile);
  for (const s of config.series) if (s.drift.webhook?.urlFile) s.drift.webhook.urlFile = abs(s.drift.webhook.urlFile);
  if (config.defaults.drift.webhook?.urlFile) config.defaults.drift.webhook.urlFile = abs(config.defaults.drift.webhook.urlFile);
}

/** A copy of the merged config with the keys zod flagged as unknown removed. */
function withoutUnknownKeys(merged: Obj, error: z.ZodError): Obj {
  const copy = structuredClone(merged) as Obj;
  for (const iss of error.issues) {
    if (iss.code !== 'unrecognized_keys') continue;
    let cur: unknown = copy;
    for (const s of iss.path) cur = (cur as Record<PropertyKey, unknown> | undefined)?.[s as string];
    if (isObj(cur)) for (const k of iss.keys) delete cur[k];
  }
  return copy;
}

/** The store and the series entries that parse on their own, with their positions in the file. */
function partialConfig(merged: Obj): { config: Config; indices: number[] } | undefined {
  const base = ConfigSchema.shape;
  const store = base.store.safeParse(merged.store);
  const series: Config['series'] = [];
  const indices: number[] = [];
  if (Array.isArray(merged.series)) {
    merged.series.forEach((e, i) => {
      const r = SeriesEntrySchema.safeParse(e);
      if (r.success) {
        series.push(r.data);
        indices.push(i);
      }
    });
  }
  const rest = ConfigSchema.safeParse({ series: [{ name: 'x' }] });
  if (!rest.success) return undefined;
  const storeCfg: Config['store'] = store.success ? store.data : { ...rest.data.store, kind: 'embedded' };
  return { config: { ...rest.data, store: storeCfg, series }, indices };
}

/** Validates a config given as a plain object (what the YAML parses to). */
export function parseConfigObject(raw: unknown, opts: LoadOptions = {}): LoadResult {
  const baseDir = opts.baseDir ?? (opts.file ? dirname(resolvePath(opts.file)) : process.cwd());
  if (!isObj(raw)) {
    return { ok: false, issues: [{ code: 'CONFIG_TYPE', path: '', message: `the config must be a mapping of keys, got ${raw === null || raw === undefined ? 'an empty file' : preview(raw)}`, hint: 'start from config/demo.yaml' }] };
  }
  const merged: Obj = { ...raw };
  if (Array.isArray(raw.series)) {
    merged.series = raw.series.map((e) => (isObj(e) && isObj(raw.defaults) ? mergeDefaults(raw.defaults, e) : e));
  }
  const parsed = ConfigSchema.safeParse(merged, { reportInput: true });
  const mapRaw = (list: RawIssue[]) =>
    list.map((i) => {
      const { segments, ...rest } = i;
      return { ...rest, path: formatPath(origin(raw, segments)) };
    });
  if (!parsed.success) {
    // Still run the combination checks on the parts that parsed, so one pass reports everything.
    const schemaIssues = zodIssues(raw, merged, parsed.error);
    const partial = partialConfig(withoutUnknownKeys(merged, parsed.error));
    const combo = partial ? resolveAll(partial.config, partial.indices).issues : [];
    return { ok: false, issues: dedupe([...schemaIssues, ...mapRaw(combo)]) };
  }
  const config = parsed.data;
  const { series, issues } = resolveAll(config);
  if (issues.length) return { ok: false, issues: dedupe(mapRaw(issues)) };
  absolutise(config, baseDir);
  return { ok: true, value: { config, series, baseDir, ...(opts.file ? { file: resolvePath(opts.file) } : {}) } };
}

/** Validates YAML text. */
export function parseConfigText(text: string, opts: LoadOptions = {}): LoadResult {
  const lineCounter = new LineCounter();
  const doc = parseDocument(text, { prettyErrors: false, uniqueKeys: true, lineCounter });
  if (doc.errors.length) {
    return {
      ok: false,
      issues: doc.errors.map((e) => ({
        code: 'CONFIG_YAML' as const,
        path: '',
        message: e.message.split('\n')[0],
        hint: 'fix the YAML syntax at that line (indentation, quotes, duplicate keys)',
        line: lineCounter.linePos(e.pos[0]).line,
      })),
    };
  }
  // toJS throws on an alias without its anchor and on alias bombs (too many expansions).
  let raw: unknown;
  try {
    raw = doc.toJS({ maxAliasCount: 100 });
  } catch (e) {
    // Point at the alias to blame: the first one without its anchor, else the first one.
    let first: number | undefined;
    let unresolved: number | undefined;
    visit(doc, {
      Alias(_k, node) {
        const at = node.range?.[0];
        if (at === undefined) return;
        first ??= at;
        if (node.resolve(doc) === undefined) {
          unresolved = at;
          return visit.BREAK;
        }
      },
    });
    const pos = unresolved ?? first;
    return {
      ok: false,
      issues: [
        {
          code: 'CONFIG_YAML',
          path: '',
          message: String((e as Error).message ?? e).split('\n')[0],
          hint: 'define each anchor (&name) before its alias (*name) and do not nest aliases deeply',
          ...(pos !== undefined ? { line: lineCounter.linePos(pos).line } : {}),
        },
      ],
    };
  }
  return parseConfigObject(raw, opts);
}

/** Reads and validates a config file. `readFile` is injectable for tests. */
export function loadConfigFile(file: string, deps: { readFile?: (p: string) => string } = {}): LoadResult {
  let text: string;
  try {
    text = (deps.readFile ?? ((p: string) => readFileSync(p, 'utf8')))(file);
  } catch (e) {
    const code = (e as NodeJS.ErrnoException).code ?? 'unknown';
    return { ok: false, issues: [{ code: 'CONFIG_READ', path: '', message: `cannot read ${file} (${code})`, hint: code === 'ENOENT' ? 'check the --config path' : 'check the file permissions' }] };
  }
  return parseConfigText(text, { file });
}

/** Like loadConfigFile but throws a ConfigError listing every issue. */
export function loadConfigOrThrow(file: string): LoadedConfig {
  const r = loadConfigFile(file);
  if (!r.ok) throw new ConfigError(r.issues);
  return r.value;
}

/**
 * Resolves every series of a parsed config into its ForecastSettings and run settings.
 * Throws a ConfigError listing every combination issue when the config is not usable.
 */
export function resolveSeries(config: Config): ResolvedSeries[] {
  const { series, issues } = resolveAll(config);
  if (issues.length) throw new ConfigError(issues.map(({ segments, ...rest }) => ({ ...rest, path: formatPath(segments) })));
  return series;
}
