/**
 * `radcast tune --write`: puts the tuned keys into one series entry of the config file, keeping
 * every other byte of the file (comments, blank lines, aligned comment columns, quoting, flow
 * lists) as it was.
 *
 * The yaml package's Document API finds the entry and each key's value node with its source
 * range; only those ranges are replaced (or one line per missing key is inserted after the
 * entry's `name:` line). A full `doc.toString()` is not used: it re-spaces aligned comments and
 * rewrites flow lists, which changed 23 untouched lines of config/demo.yaml when tried. The result
 * is parsed again and must equal the old document with exactly the tuned keys changed.
 *
 * Backup first: FILE.bak, or FILE.<UTC timestamp>.bak when FILE.bak exists already; then the new
 * text is written to a temporary file beside FILE and renamed over it.
 */
import { copyFileSync, existsSync, readFileSync, renameSync, statSync, writeFileSync, chmodSync, unlinkSync } from 'node:fs';
import { isDeepStrictEqual } from 'node:util';
import { isMap, isScalar, isSeq, parseDocument, type Node, type Pair, type YAMLMap } from 'yaml';
import { yamlInline } from '../evaluate/tune-grid.ts';

export interface ConfigEdit {
  key: string;
  value: unknown;
}

export type EditResult = { ok: true; text: string } | { ok: false; code: 'CONFIG_EDIT'; message: string; hint: string };

function lineStart(text: string, at: number): number {
  return text.lastIndexOf('\n', at - 1) + 1;
}

function lineEnd(text: string, at: number): number {
  const i = text.indexOf('\n', at);
  return i < 0 ? text.length : i;
}

const fail = (message: string, hint: string): EditResult => ({ ok: false, code: 'CONFIG_EDIT', message, hint });

/** Replaces or adds `edits` in entry `seriesIndex` of the config text. Pure. */
export function editSeriesEntry(text: string, seriesIndex: number, edits: readonly ConfigEdit[]): EditResult {
  const doc = parseDocument(text);
  if (doc.errors.length) return fail(`the config does not parse: ${doc.errors[0].message.split('\n')[0]}`, 'fix the YAML first (radcast check)');
  const list = doc.get('series', true);
  if (!isSeq(list)) return fail('the config has no series list', 'the file changed since it was loaded?');
  const entry = list.items[seriesIndex];
  if (!isMap(entry)) return fail(`series[${seriesIndex}] is not a mapping`, 'the file changed since it was loaded?');
  const map = entry as YAMLMap<unknown, unknown>;
  const pairOf = (key: string) => map.items.find((p) => isScalar(p.key) && p.key.value === key) as Pair<Node, Node> | undefined;

  const splices: Array<{ at: number; end: number; text: string; order: number }> = [];
  const inserts: string[] = [];
  const namePair = pairOf('name');
  if (!namePair || !namePair.value?.range || !namePair.key?.range) return fail(`series[${seriesIndex}] has no name`, 'the file changed since it was loaded?');
  edits.forEach((e, order) => {
    const pair = pairOf(e.key);
    const node = pair?.value as Node | null | undefined;
    if (pair && node?.range) {
      const [start, valueEnd] = node.range;
      if (isSeq(node) && !node.flow && Array.isArray(e.value)) {
        // A block list stays a block list, one item per line at the same indentation.
        const indent = ' '.repeat(start - lineStart(text, start));
        const body = e.value.map((v) => `- ${yamlInline(v, true)}`).join(`\n${indent}`);
        splices.push({ at: start, end: valueEnd, text: `${body}${text.slice(valueEnd - 1, valueEnd) === '\n' ? '\n' : ''}`, order });
      } else {
        splices.push({ at: start, end: valueEnd, text: yamlInline(e.value), order });
      }
    } else if (pair) {
      return; // a key without a value node (`key:` alone) is handled below as an insert
    } else {
      inserts.push(`${e.key}: ${yamlInline(e.value)}`);
    }
  });
  for (const e of edits) {
    const pair = pairOf(e.key);
    if (pair && !(pair.value as Node | null)?.range) return fail(`series[${seriesIndex}].${e.key} has no value to replace`, `give ${e.key} a value or remove the empty key, then run again`);
  }
  if (inserts.length) {
    const keyStart = namePair.key.range![0];
    if (map.flow) {
      const at = namePair.value.range![1];
      splices.push({ at, end: at, text: inserts.map((l) => `, ${l}`).join(''), order: edits.length });
    } else {
      const indent = ' '.repeat(keyStart - lineStart(text, keyStart));
      const at = lineEnd(text, namePair.value.range![1]);
      splices.push({ at, end: at, text: inserts.map((l) => `\n${indent}${l}`).join(''), order: edits.length });
    }
  }
  splices.sort((a, b) => b.at - a.at || b.order - a.order);
  let out = text;
  for (const s of splices) out = out.slice(0, s.at) + s.text + out.slice(s.end);

  // The edit must change exactly the tuned keys and nothing else.
  const before = doc.toJS() as { series: Array<Record<string, unknown>> };
  const afterDoc = parseDocument(out);
  if (afterDoc.errors.length) return fail(`the edited config would not parse (${afterDoc.errors[0].message.split('\n')[0]})`, 'paste the printed snippet by hand');
  const expected = structuredClone(before);
  for (const e of edits) expected.series[seriesIndex][e.key] = structuredClone(e.value);
  if (!isDeepStrictEqual(afterDoc.toJS(), expected)) return fail('the edit would change more than the tuned keys', 'paste the printed snippet by hand');
  return { ok: true, text: out };
}

function stamp(d: Date): string {
  return d.toISOString().replace(/[-:]/g, '').replace(/\.\d+Z$/, 'Z');
}

/** Backup path: FILE.bak, or FILE.<timestamp>.bak when that exists. */
export function backupPath(file: string, now: Date = new Date(), exists: (p: string) => boolean = existsSync): string {
  const plain = `${file}.bak`;
  if (!exists(plain)) return plain;
  let p = `${file}.${stamp(now)}.bak`;
  for (let i = 1; exists(p); i++) p = `${file}.${stamp(now)}-${i}.bak`;
  return p;
}

/**
 * Writes `edits` into the config file after a backup. Returns the backup path; throws nothing:
 * problems come back as a value and leave the file untouched.
 */
export function writeTunedConfig(file: string, seriesIndex: number, edits: readonly ConfigEdit[], opts: { now?: Date; validate?: (text: string) => string | null } = {}): { ok: true; backup: string; text: string } | { ok: false; code: string; message: string; hint: string } {
  let text: string;
  try {
    text = readFileSync(file, 'utf8');
  } catch (e) {
    return { ok: false, code: 'CONFIG_READ', message: `cannot read ${file} (${(e as NodeJS.ErrnoException).code ?? 'error'})`, hint: 'check the --config path' };
  }
  const r = editSeriesEntry(text, seriesIndex, edits);
  if (!r.ok) return r;
  const invalid = opts.validate?.(r.text) ?? null;
  if (invalid) return { ok: false, code: 'CONFIG_EDIT', message: `the edited config would not load: ${invalid}`, hint: 'paste the printed snippet by hand and adjust' };
  const backup = backupPath(file, opts.now);
  const tmp = `${file}.tune-${process.pid}.tmp`;
  try {
    copyFileSync(file, backup);
    writeFileSync(tmp, r.text);
    try {
      chmodSync(tmp, statSync(file).mode & 0o7777);
    } catch {
      /* keep the default mode */
    }
    renameSync(tmp, file);
  } catch (e) {
    try {
      if (existsSync(tmp)) unlinkSync(tmp);
    } catch {
      /* nothing left to clean */
    }
    return { ok: false, code: 'CONFIG_WRITE', message: `cannot write ${file} (${(e as NodeJS.ErrnoException).code ?? 'error'})`, hint: 'check the permissions of the file and its directory' };
  }
  return { ok: true, backup, text: r.text };
}
