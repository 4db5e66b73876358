/**
 * Flux for the v2 API. Every value that comes from a selector goes through the client's `flux`
 * tagged template, which writes it as a Flux string literal with ", \, CR, LF, TAB and "${"
 * escaped; so no selector (however hostile) can change the structure of the query.
 */
import { flux, fluxExpression, type ParameterizedQuery } from '@influxdata/influxdb-client';
import type { ResolvedSelector } from './selector.ts';

/**
 * Query of one selector over [fromMs, toMs). With aggregateMs > 0: mean per window, windows
 * aligned to the epoch, each labelled by its start (timeSrc "_start", like InfluxQL), empty
 * windows left out.
 */
export function buildFluxQuery(bucket: string, sel: ResolvedSelector, fromMs: number, toMs: number): ParameterizedQuery {
  let cond = flux`r._measurement == ${sel.measurement} and r._field == ${sel.field}`;
  for (const [k, v] of sel.tags) cond = flux`${cond} and r[${k}] == ${v}`;
  let q = flux`from(bucket: ${bucket})
  |> range(start: ${new Date(fromMs)}, stop: ${new Date(toMs)})
  |> filter(fn: (r) => ${cond})`;
  if (sel.aggregateMs > 0) {
    // A duration literal; the number was checked to be a safe integer, so it is inserted as-is.
    const every = fluxExpression(`${Math.trunc(sel.aggregateMs)}ms`);
    q = flux`${q}
  |> aggregateWindow(every: ${every}, fn: mean, createEmpty: false, timeSrc: "_start")`;
  }
  return flux`${q}
  |> keep(columns: ["_time", "_value"])`;
}

/** RFC 3339 time from a Flux answer (nanosecond fractions allowed) to epoch ms. */
export function parseFluxTime(s: string): number {
  // Date.parse handles at most millisecond fractions reliably; cut the rest.
  const m = /^(.*T\d\d:\d\d:\d\d)(\.\d+)?(Z|[+-]\d\d:\d\d)$/.exec(s);
  if (!m) return Date.parse(s);
  const frac = m[2] ? m[2].slice(0, 4).padEnd(4, '0') : '';
  return Date.parse(`${m[1]}${frac}${m[3]}`);
}
