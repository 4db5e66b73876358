/**
 * InfluxQL for the v1 API: quoting, the read query and the answer parser.
 *
 * Quoting follows InfluxQL's string scanner: inside '…' or "…" the escapes \\ \' \" \n are
 * decoded and a raw newline ends the token, so backslash, both quotes and newline are escaped and
 * nothing else needs to be. Identifiers are always double-quoted and typed (::field / ::tag), so a
 * name that equals a keyword or a tag key that equals a field key cannot change the meaning.
 */
import type { Reading } from '../../series/types.ts';
import { StoreError, snippet } from './errors.ts';
import type { ResolvedSelector } from './selector.ts';

function escapeQuoted(s: string, quote: '"' | "'"): string {
  let out = '';
  for (const ch of s) {
    if (ch === '\\') out += '\\\\';
    else if (ch === quote) out += '\\' + quote;
    else if (ch === '\n') out += '\\n';
    else out += ch;
  }
  return out;
}

/** "identifier" with \, " and newline escaped. */
export function quoteIdent(name: string): string {
  return `"${escapeQuoted(name, '"')}"`;
}

/** 'string literal' with \, ' and newline escaped. */
export function quoteString(value: string): string {
  return `'${escapeQuoted(value, "'")}'`;
}

/**
 * SELECT of one selector over [fromMs, toMs). With aggregateMs > 0 the server returns the mean
 * per window (buckets aligned to the epoch, labelled by their start; empty buckets left out).
 */
export function buildReadQuery(sel: ResolvedSelector, fromMs: number, toMs: number, retentionPolicy?: string): string {
  const from = (retentionPolicy ? quoteIdent(retentionPolicy) + '.' : '') + quoteIdent(sel.measurement);
  const field = `${quoteIdent(sel.field)}::field`;
  const where = [`time >= ${Math.trunc(fromMs)}ms`, `time < ${Math.trunc(toMs)}ms`, ...sel.tags.map(([k, v]) => `${quoteIdent(k)}::tag = ${quoteString(v)}`)].join(' AND ');
  if (sel.aggregateMs > 0) {
    return `SELECT mean(${field}) AS "value" FROM ${from} WHERE ${where} GROUP BY time(${Math.trunc(sel.aggregateMs)}ms) fill(none)`;
  }
  return `SELECT ${field} AS "value" FROM ${from} WHERE ${where}`;
}

/** A JSON value from the server as a reading value: numbers as they are, booleans 1/0, anything else NaN. */
export function readingValue(v: unknown): number {
  if (typeof v === 'number') return v;
  if (typeof v === 'boolean') return v ? 1 : 0;
  return NaN;
}

interface ChunkSeries {
  columns?: string[];
  values?: unknown[][];
}
interface Chunk {
  error?: string;
  results?: { statement_id?: number; error?: string; series?: ChunkSeries[] }[];
}

/**
 * Parses a /query answer (chunked: one JSON object per line; also accepts a single object).
 * Statement errors become StoreErrors; "no such measurement / field / tag" is simply no rows.
 */
export function parseQueryAnswer(body: string, series: string, at: string): Reading[] {
  const out: Reading[] = [];
  for (const line of body.split('\n')) {
    if (line.trim() === '') continue;
    let chunk: Chunk;
    try {
      chunk = JSON.parse(line) as Chunk;
    } catch {
      throw new StoreError('STORE_PROTOCOL', `${at}: answer is not JSON: ${snippet(line)}`, { series, at, hint: 'is store.influxdb.url an InfluxDB server?' });
    }
    const err = chunk.error ?? chunk.results?.find((r) => r.error)?.error;
    if (err) throw statementError(err, series, at);
    for (const r of chunk.results ?? []) {
      for (const s of r.series ?? []) {
        const cols = s.columns ?? [];
        const ti = cols.indexOf('time');
        const vi = cols.indexOf('value');
        if (ti < 0 || vi < 0) throw new StoreError('STORE_PROTOCOL', `${at}: answer lacks time/value columns (${cols.join(',')})`, { series, at });
        for (const row of s.values ?? []) {
          const t = row[ti];
          if (typeof t !== 'number') throw new StoreError('STORE_PROTOCOL', `${at}: time ${JSON.stringify(t)} is not epoch ms`, { series, at, hint: 'the query must ask for epoch=ms' });
          out.push({ t, v: readingValue(row[vi]) });
        }
      }
    }
  }
  return out;
}

function statementError(message: string, series: string, at: string): StoreError {
  if (/database not found/i.test(message)) {
    return new StoreError('STORE_DATABASE_MISSING', `${at}: ${snippet(message)}`, {
      series,
      at,
      hint: 'create the database (CREATE DATABASE name) or fix store.influxdb.database',
    });
  }
  if (/retention policy not found/i.test(message)) {
    return new StoreError('QUERY_REJECTED', `${at}: ${snippet(message)}`, { series, at, hint: 'fix store.influxdb.retentionPolicy' });
  }
  if (/unsupported mean iterator type/i.test(message)) {
    return new StoreError('QUERY_REJECTED', `${at}: the field is not numeric, so it cannot be averaged (${snippet(message)})`, {
      series,
      at,
      hint: 'point source.field at a numeric field, or set source.aggregate to "none"',
    });
  }
  return new StoreError('QUERY_REJECTED', `${at}: ${snippet(message)}`, { series, at, hint: 'check the series source (measurement, field, tags)' });
}
