/**
 * Reading a readings CSV (timestamp and value columns) into Reading[] with per-line errors, and
 * writing CSV fields. Fields follow RFC 4180 (double quotes, "" inside quotes); the delimiter is
 * taken from the first line (comma, semicolon or tab). Timestamps are ISO-8601 / RFC 3339 with a
 * UTC offset or epoch seconds / milliseconds; a local time without offset is refused because it
 * is ambiguous around daylight-saving changes.
 */
import type { Reading } from '../series/types.ts';

export interface CsvIssue {
  code: 'CSV_TIME' | 'CSV_VALUE' | 'CSV_COLUMNS' | 'CSV_QUOTE' | 'CSV_HEADER' | 'CSV_EMPTY';
  /** 1-based line number in the file. */
  line: number;
  message: string;
  hint: string;
}

export interface CsvOptions {
  /** Column of the timestamp: header name or 1-based index (default: a column named like a time, else the first). */
  timeColumn?: string;
  /** Column of the value: header name or 1-based index (default: a column named like a value, else the second). */
  valueColumn?: string;
  /** How bare numbers are read as times: auto (>= 1e11 means ms, else s), s or ms. */
  epoch?: 'auto' | 's' | 'ms';
  /** Stop collecting issues after this many (the count goes on). */
  maxIssues?: number;
}

export interface CsvResult {
  readings: Reading[];
  issues: CsvIssue[];
  /** Issues found in total (issues holds at most maxIssues). */
  issueCount: number;
  /** Data rows read (excluding header, blank and comment lines). */
  rows: number;
  /** Timestamps that occurred more than once (the last one is kept). */
  duplicates: number;
  /** Rows whose value was empty / NaN / null (stored as missing). */
  missing: number;
  header: string[] | null;
  delimiter: string;
}

/** Splits one line into fields (RFC 4180 quoting). Returns null when a quote is not closed. */
export function splitCsvLine(line: string, delimiter: string): string[] | null {
  const out: string[] = [];
  let field = '';
  let i = 0;
  let quoted = false;
  let startOfField = true;
  while (i < line.length) {
    const ch = line[i];
    if (quoted) {
      if (ch === '"') {
        if (line[i + 1] === '"') {
          field += '"';
          i += 2;
          continue;
        }
        quoted = false;
        i++;
        continue;
      }
      field += ch;
      i++;
      continue;
    }
    if (ch === '"' && startOfField) {
      quoted = true;
      startOfField = false;
      i++;
      continue;
    }
    if (ch === delimiter) {
      out.push(field);
      field = '';
      startOfField = true;
      i++;
      continue;
    }
    field += ch;
    startOfField = false;
    i++;
  }
  if (quoted) return null;
  out.push(field);
  return out;
}

/** Quotes a field when it needs it (RFC 4180). */
export function csvField(v: string | number): string {
  const s = typeof v === 'number' ? (Number.isFinite(v) ? String(v) : '') : v;
  return /[",\r\n]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s;
}

const ISO = /^(\d{4})-(\d{2})-(\d{2})[Tt ](\d{2}):(\d{2})(?::(\d{2})(?:[.,](\d{1,9}))?)?\s*([Zz]|[+-]\d{2}(?::?\d{2})?)?$/;
const DAYS = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
const isLeap = (y: number) => (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;

export type TimeParse = { ok: true; ms: number } | { ok: false; message: string; hint: string };

/** ISO-8601 / RFC 3339 date-time with offset, or epoch seconds / milliseconds. */
export function parseTimestamp(text: string, epoch: 'auto' | 's' | 'ms' = 'auto'): TimeParse {
  const s = text.trim();
  if (s === '') return { ok: false, message: 'the timestamp is empty', hint: 'every row needs a time' };
  if (/^[+-]?\d+(\.\d+)?$/.test(s)) {
    const n = Number(s);
    const unit = epoch === 'auto' ? (Math.abs(n) >= 1e11 ? 'ms' : 's') : epoch;
    const ms = Math.round(unit === 's' ? n * 1000 : n);
    if (!Number.isSafeInteger(ms) || Math.abs(ms) > 8.64e15) return { ok: false, message: `epoch time ${s} is out of range`, hint: 'give seconds or milliseconds since 1970-01-01T00:00Z' };
    return { ok: true, ms };
  }
  const m = ISO.exec(s);
  if (!m) {
    return { ok: false, message: `"${s}" is neither an ISO-8601 date-time nor an epoch number`, hint: 'write e.g. 2025-03-30T01:00:00+01:00, 2025-03-30T00:00:00Z or 1743296400' };
  }
  const [, ys, mos, ds, hs, mis, ss, frac, off] = m;
  if (!off) return { ok: false, message: `"${s}" has no UTC offset`, hint: 'add Z or an offset like +01:00; local times are ambiguous at daylight-saving changes' };
  const y = Number(ys);
  const mo = Number(mos);
  const d = Number(ds);
  const h = Number(hs);
  const mi = Number(mis);
  const sec = ss === undefined ? 0 : Number(ss);
  if (mo < 1 || mo > 12) return { ok: false, message: `month ${mos} in "${s}" does not exist`, hint: 'months are 01..12' };
  const dim = mo === 2 && isLeap(y) ? 29 : DAYS[mo - 1];
  if (d < 1 || d > dim) return { ok: false, message: `day ${ds} of ${ys}-${mos} in "${s}" does not exist`, hint: `that month has ${dim} days` };
  if (h > 23 || mi > 59) return { ok: false, message: `time ${hs}:${mis} in "${s}" does not exist`, hint: 'hours are 00..23, minutes 00..59' };
  if (sec > 59) return { ok: false, message: `second ${ss} in "${s}" is not supported`, hint: 'leap seconds (:60) cannot be represented in epoch milliseconds; use :59' };
  let offMin = 0;
  if (off !== 'Z' && off !== 'z') {
    const sign = off[0] === '-' ? -1 : 1;
    const digits = off.slice(1).replace(':', '');
    const oh = Number(digits.slice(0, 2));
    const om = digits.length > 2 ? Number(digits.slice(2, 4)) : 0;
    if (oh > 23 || om > 59) return { ok: false, message: `offset ${off} in "${s}" is not valid`, hint: 'offsets are -23:59..+23:59' };
    offMin = sign * (oh * 60 + om);
  }
  const ms = frac ? Math.round(Number(`0.${frac}`) * 1000) : 0;
  return { ok: true, ms: Date.UTC(y, mo - 1, d, h, mi, sec, ms) - offMin * 60_000 };
}

const TIME_NAMES = /^(timestamp|time|ts|t|date|datetime|date_time|time_utc)$/i;
const VALUE_NAMES = /^(value|v|reading|load|kw|val)$/i;

function looksLikeHeader(fields: string[]): boolean {
  // A header row has a first field that is not a time and no numeric second field.
  return !parseTimestamp(fields[0] ?? '').ok && !(fields.length > 1 && /^[+-]?(\d+([.,]\d*)?|[.,]\d+)([eE][+-]?\d+)?$/.test((fields[1] ?? '').trim()));
}

function pickColumn(spec: string | undefined, header: string[] | null, fallback: number, names: RegExp): number | string {
  if (spec !== undefined) {
    if (/^\d+$/.test(spec)) return Number(spec) - 1;
    const i = header ? header.findIndex((h) => h.trim() === spec) : -1;
    return i >= 0 ? i : `column "${spec}" is not in the header`;
  }
  if (header) {
    const i = header.findIndex((h) => names.test(h.trim()));
    if (i >= 0) return i;
  }
  return fallback;
}

/** Parses the whole file; never throws. */
export function parseReadingsCsv(text: string, opts: CsvOptions = {}): CsvResult {
  const maxIssues = opts.maxIssues ?? 20;
  const result: CsvResult = { readings: [], issues: [], issueCount: 0, rows: 0, duplicates: 0, missing: 0, header: null, delimiter: ',' };
  const issue = (i: CsvIssue) => {
    result.issueCount++;
    if (result.issues.length < maxIssues) result.issues.push(i);
  };
  const lines = text.replace(/^\uFEFF/, '').split(/\r?\n/);
  let first = lines.findIndex((l) => l.trim() !== '' && !l.startsWith('#'));
  if (first < 0) {
    issue({ code: 'CSV_EMPTY', line: 1, message: 'the file has no rows', hint: 'expected lines of timestamp,value' });
    return result;
  }
  const firstLine = lines[first];
  const delimiter = firstLine.includes('\t') ? '\t' : firstLine.includes(';') ? ';' : ',';
  result.delimiter = delimiter;
  const headFields = splitCsvLine(firstLine, delimiter) ?? [];
  if (looksLikeHeader(headFields)) {
    result.header = headFields.map((h) => h.trim());
    first++;
  }
  const tCol = pickColumn(opts.timeColumn, result.header, 0, TIME_NAMES);
  const vCol = pickColumn(opts.valueColumn, result.header, tCol === 1 ? 0 : 1, VALUE_NAMES);
  for (const [col, what] of [[tCol, 'time'], [vCol, 'value']] as const) {
    if (typeof col === 'string') {
      issue({ code: 'CSV_HEADER', line: first, message: `${what} ${col}`, hint: `header columns: ${(result.header ?? []).join(', ') || 'none (the file has no header)'}` });
      return result;
    }
  }
  const ti = tCol as number;
  const vi = vCol as number;
  const seen = new Map<number, number>();
  const decimalComma = delimiter !== ',';
  for (let n = first; n < lines.length; n++) {
    const raw = lines[n];
    if (raw.trim() === '' || raw.startsWith('#')) continue;
    const lineNo = n + 1;
    result.rows++;
    const fields = splitCsvLine(raw, delimiter);
    if (!fields) {
      issue({ code: 'CSV_QUOTE', line: lineNo, message: 'a quoted field is not closed', hint: 'close the quote; a quote inside a quoted field is written ""' });
      continue;
    }
    if (fields.length <= Math.max(ti, vi)) {
      issue({ code: 'CSV_COLUMNS', line: lineNo, message: `${fields.length} column(s), need at least ${Math.max(ti, vi) + 1}`, hint: `each row needs the time (column ${ti + 1}) and the value (column ${vi + 1}), separated by "${delimiter === '\t' ? '\\t' : delimiter}"` });
      continue;
    }
    const t = parseTimestamp(fields[ti], opts.epoch);
    if (!t.ok) {
      issue({ code: 'CSV_TIME', line: lineNo, message: t.message, hint: t.hint });
      continue;
    }
    let vs = fields[vi].trim();
    let v: number;
    if (vs === '' || /^(nan|null|na)$/i.test(vs)) {
      v = NaN;
      result.missing++;
    } else {
      if (decimalComma && /^[+-]?\d+,\d+$/.test(vs)) vs = vs.replace(',', '.');
      v = /^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$/.test(vs) ? Number(vs) : NaN;
      if (!Number.isFinite(v)) {
        issue({ code: 'CSV_VALUE', line: lineNo, message: `value "${fields[vi]}" is not a finite number`, hint: 'use a plain decimal number (e.g. 412.5); leave it empty for a missing reading' });
        continue;
      }
    }
    const at = seen.get(t.ms);
    if (at !== undefined) {
      result.duplicates++;
      result.readings[at] = { t: t.ms, v };
    } else {
      seen.set(t.ms, result.readings.length);
      result.readings.push({ t: t.ms, v });
    }
  }
  if (result.rows === 0 && result.issueCount === 0) issue({ code: 'CSV_EMPTY', line: first, message: 'the file has a header but no data rows', hint: 'add lines of timestamp,value' });
  return result;
}
