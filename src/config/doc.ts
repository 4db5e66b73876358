/**
 * Renders the config reference (Markdown) from the schema itself, so the documentation cannot
 * drift from what the loader accepts. Used by scripts/gen-config-doc.ts and `radcast docs`.
 */
import { z } from 'zod';
import { ConfigSchema } from './schema.ts';

interface Node {
  type?: string | string[];
  description?: string;
  unit?: string;
  default?: unknown;
  enum?: unknown[];
  const?: unknown;
  pattern?: string;
  format?: string;
  minimum?: number;
  maximum?: number;
  exclusiveMinimum?: number;
  exclusiveMaximum?: number;
  minItems?: number;
  properties?: Record<string, Node>;
  required?: string[];
  items?: Node;
  anyOf?: Node[];
  additionalProperties?: Node | boolean;
}

const MAX_SAFE = Number.MAX_SAFE_INTEGER;

function typeOf(n: Node): string {
  if (n.anyOf) return n.anyOf.map(typeOf).filter((t, i, a) => a.indexOf(t) === i).join(' \\| ');
  if (n.const !== undefined) return JSON.stringify(n.const);
  if (n.enum) return n.enum.map((e) => JSON.stringify(e)).join(' \\| ');
  const t = Array.isArray(n.type) ? n.type.join(' \\| ') : n.type;
  if (t === 'array') return `list of ${n.items ? typeOf(n.items) : 'any'}`;
  if (t === 'object' && n.additionalProperties && typeof n.additionalProperties === 'object') return `map of ${typeOf(n.additionalProperties)}`;
  if (t === 'string' && n.pattern === '^(\\d+(ms|s|m|h|d|w))+$') return 'duration';
  if (t === 'string' && n.format === 'uri') return 'URL';
  if (t === 'integer' || t === 'number') {
    const lo = n.minimum ?? (n.exclusiveMinimum !== undefined ? `>${n.exclusiveMinimum}` : undefined);
    const hi = n.maximum !== undefined && n.maximum < MAX_SAFE ? n.maximum : n.exclusiveMaximum !== undefined ? `<${n.exclusiveMaximum}` : undefined;
    const range = lo !== undefined || hi !== undefined ? ` (${lo ?? ''}..${hi ?? ''})` : '';
    return `${t}${range}`;
  }
  return t ?? 'any';
}

function cell(s: string): string {
  return s.replace(/\|/g, '\\|').replace(/\n/g, ' ');
}

function fmtDefault(n: Node, required: boolean, section = false): string {
  if (n.default === undefined) return required ? '*required*' : '—';
  const d = n.default;
  if (section && typeof d === 'object' && d !== null && !Array.isArray(d) && Object.keys(d).length === 0) return '(section)';
  return '`' + cell(JSON.stringify(d)) + '`';
}

function rows(n: Node, prefix: string, out: string[], requiredHere = false): void {
  const isSection = n.type === 'object' && n.properties;
  if (prefix) {
    if (isSection) out.push(`| **\`${prefix}\`** | section | ${fmtDefault(n, requiredHere, true)} | | ${cell(n.description ?? '')} |`);
    else out.push(`| \`${prefix}\` | ${typeOf(n)} | ${fmtDefault(n, requiredHere)} | ${cell(n.unit ?? '')} | ${cell(n.description ?? '')} |`);
  }
  const objectBranch = isSection ? n : n.anyOf?.find((b) => b.type === 'object' && b.properties);
  if (objectBranch?.properties) {
    for (const [k, child] of Object.entries(objectBranch.properties)) {
      rows(child, prefix ? `${prefix}.${k}` : k, out, objectBranch.required?.includes(k) && child.default === undefined);
    }
  }
  if (n.type === 'array' && n.items?.type === 'object' && n.items.properties) {
    for (const [k, child] of Object.entries(n.items.properties)) rows(child, `${prefix}[].${k}`, out, n.items.required?.includes(k) && child.default === undefined);
  }
}

const HEAD = ['| Key | Type | Default | Unit | Meaning |', '|---|---|---|---|---|'];

/** The whole reference as Markdown. Deterministic: same schema, same text. */
export function renderConfigReference(): string {
  const root = z.toJSONSchema(ConfigSchema, { io: 'input', unrepresentable: 'any' }) as Node;
  const p = root.properties!;
  const out: string[] = [
    '<!-- Generated from src/config/schema.ts by `npx tsx scripts/gen-config-doc.ts`. Do not edit by hand. -->',
    '# Config reference',
    '',
    'One YAML file, passed with `--config FILE`. Unknown keys are errors. Durations are an integer and a unit (`ms`, `s`, `m`, `h`, `d`, `w`), combinable (`1h30m`). Where the type says `integer | duration` a bare integer counts steps of the series and a duration must be a whole number of steps. Lag lists take integers, ranges (`"1-24"`) and durations (`"1w"`). Relative file paths are relative to the config file. Secrets are never written in the file: give the name of an environment variable (`*Env`) or a file (`*File`).',
    '',
  ];
  for (const section of ['store', 'state', 'http', 'log', 'daemon']) {
    out.push(`## \`${section}\``, '', p[section].description ?? '', '', ...HEAD);
    rows(p[section], section, out);
    out.push('');
  }
  const seriesItem = p.series.items!;
  out.push(
    '## Series options (`defaults` and each `series` entry)',
    '',
    'Every option below can be set once under `defaults:` and overridden in any entry of `series:`. Sections merge key by key; lists replace.',
    '',
    ...HEAD,
  );
  rows(p.defaults, '', out);
  out.push('', '## `series`', '', `${p.series.description ?? ''} Each entry has the series options above plus its name:`, '', ...HEAD);
  for (const k of ['name']) rows(seriesItem.properties![k], k, out, seriesItem.required?.includes(k));
  out.push('');
  return out.join('\n');
}

export const README_REFERENCE_START = '<!-- config-reference:start (generated from src/config/schema.ts by `npx tsx scripts/gen-config-doc.ts`; do not edit by hand) -->';
export const README_REFERENCE_END = '<!-- config-reference:end -->';

/**
 * The README carries the same reference as docs/config-reference.md, one heading level deeper.
 * Returns the README text with the section between the markers replaced (markers appended at the
 * end when missing).
 */
export function spliceReadmeReference(readme: string, reference: string): string {
  const body = reference
    .split('\n')
    .filter((l) => !l.startsWith('<!--'))
    .map((l) => (l.startsWith('#') ? `#${l}` : l))
    .join('\n')
    .trim();
  const block = `${README_REFERENCE_START}\n${body}\n${README_REFERENCE_END}`;
  const a = readme.indexOf(README_REFERENCE_START.slice(0, 28));
  const b = readme.indexOf(README_REFERENCE_END);
  if (a < 0 || b < a) return `${readme.trimEnd()}\n\n${block}\n`;
  return readme.slice(0, a) + block + readme.slice(b + README_REFERENCE_END.length);
}
