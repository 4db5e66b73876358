/**
 * A series selector as the adapter uses it: defaults filled in and checked against what the
 * chosen query language can express. Anything that cannot be expressed is refused here with
 * SELECTOR_INVALID before a request is made; everything else is escaped by the query builders,
 * so a hostile name can at worst match nothing.
 */
import type { SourceSelector } from '../types.ts';
import { StoreError } from './errors.ts';

export interface ResolvedSelector {
  series: string;
  measurement: string;
  field: string;
  /** Tag filters sorted by key (stable query text). */
  tags: [string, string][];
  /** Mean-per-window length pushed down to the server (ms); 0 = raw readings. */
  aggregateMs: number;
}

/** Flux columns that a tag filter must not name (they are not tags). */
const FLUX_RESERVED = new Set(['_measurement', '_field', '_value', '_time', '_start', '_stop', 'result', 'table']);

export function resolveSelector(sel: SourceSelector, api: 'v1' | 'v2'): ResolvedSelector {
  const series = sel.name;
  const bad = (at: string, message: string, hint: string): never => {
    throw new StoreError('SELECTOR_INVALID', `series ${JSON.stringify(series)}: ${message}`, { series, at, hint });
  };
  const measurement = sel.measurement ?? sel.name;
  const field = sel.field ?? 'value';
  if (measurement === '') bad('source.measurement', 'empty measurement name', 'set source.measurement (or give the series a name)');
  if (field === '') bad('source.field', 'empty field name', 'set source.field');
  const tags = Object.entries(sel.tags ?? {}).sort(([a], [b]) => (a < b ? -1 : a > b ? 1 : 0));
  for (const [k] of tags) if (k === '') bad('source.tags', 'empty tag key', 'remove the empty key from source.tags');
  if (api === 'v1') {
    // InfluxQL: "time" (any case) is the time column, never a field or tag. Its scanner reads CR as
    // a line break and NUL as the end of input, and string literals cannot escape either.
    if (field.toLowerCase() === 'time') bad('source.field', '"time" is not a field in InfluxQL', 'name the value field');
    for (const [k] of tags) if (k.toLowerCase() === 'time') bad('source.tags', '"time" cannot be a tag key in InfluxDB 1.x', 'remove it from source.tags');
    for (const [at, s] of [
      ['source.measurement', measurement],
      ['source.field', field],
      ...tags.flatMap(([k, v]) => [
        ['source.tags', k],
        ['source.tags', v],
      ]),
    ] as [string, string][]) {
      if (/[\r\u0000]/.test(s)) bad(at, `${JSON.stringify(s)} contains CR or NUL, which InfluxQL cannot express`, 'remove the control character');
    }
  } else {
    for (const [k] of tags) if (FLUX_RESERVED.has(k)) bad('source.tags', `${JSON.stringify(k)} is a Flux column, not a tag`, 'use source.measurement / source.field instead');
  }
  const agg = sel.aggregateMs ?? 0;
  if (!(Number.isSafeInteger(agg) && agg >= 0)) bad('source.aggregate', `aggregation window ${agg} ms is not a whole number of ms >= 0`, 'use "none", "step" or a duration like "15m"');
  return { series, measurement, field, tags, aggregateMs: agg };
}

/** Checks a read window: whole epoch-ms numbers, from < to. */
export function checkWindow(series: string, fromMs: number, toMs: number): { fromMs: number; toMs: number } {
  const f = Math.ceil(fromMs);
  const t = Math.ceil(toMs);
  if (!Number.isSafeInteger(f) || !Number.isSafeInteger(t)) {
    throw new StoreError('SELECTOR_INVALID', `series ${JSON.stringify(series)}: read window ${fromMs}..${toMs} is not in epoch ms`, { series, hint: 'a bug in the caller' });
  }
  return { fromMs: f, toMs: t };
}
