/**
 * What radcast writes to InfluxDB, as line protocol built with the client's Point.
 * The layout (documented with example queries in the README section "InfluxDB output"):
 *
 *   <forecast>  tags: series, lead (steps, "1".."H")   fields: value, q<pct>..., issued_at (int, ms)   time: target time
 *   <latest>    tags: series                           fields: value, q<pct>..., issued_at, lead (int)  time: target time
 *   <score>     tags: series, lead ("0" = all leads)   fields: mae, rmse, mase, bias, coverage, n, season
 *   <health>    tags: series                           fields: state (string), state_code (int), statistic,
 *                                                              recent_mase, baseline_mase, novelty_share, last_reading_at (int, ms)
 *
 * Tag cardinality is bounded by series x H: no run id or issue time is a tag. The same series,
 * lead and target time always form the same point key, so writing a forecast again overwrites it
 * (InfluxDB keeps one point per measurement + tag set + time). Non-finite numbers are left out.
 */
import { Point } from '@influxdata/influxdb-client';
import type { ForecastBatch, HealthPoint, ScorePoint } from '../types.ts';
import { DRIFT_STATE_CODE } from '../types.ts';
import type { MeasurementNames } from './options.ts';
import { StoreError } from './errors.ts';

export type LineKind = 'forecast' | 'score' | 'health';

/** One point ready to send. `key` identifies the point (measurement + tags + time) for overwrite-dedup. */
export interface OutLine {
  kind: LineKind;
  key: string;
  line: string;
}

const msTime = (v: string | number | Date | undefined): string | undefined => (typeof v === 'number' ? String(Math.round(v)) : undefined);

/**
 * Field name of a band quantile: percent with "_" for the decimal point.
 * "0.1" -> q10, "0.9" -> q90, "0.025" -> q2_5, "0.5" -> q50.
 */
export function quantileField(key: string): string {
  const q = Number(key);
  if (!Number.isFinite(q) || q <= 0 || q >= 1) return `q_${key}`;
  const pct = Math.round(q * 100 * 1e6) / 1e6;
  return 'q' + String(pct).replace('.', '_');
}

/**
 * Series names become tag values. Line protocol cannot carry control characters in a tag value
 * and a trailing backslash would escape the separator, so such names are refused.
 */
export function checkSeriesName(series: string): void {
  // eslint-disable-next-line no-control-regex
  if (series.length === 0 || /[\u0000-\u001f\u007f]/.test(series) || series.endsWith('\\')) {
    throw new StoreError('SERIES_NAME_INVALID', `series name ${JSON.stringify(series)} cannot be written as an InfluxDB tag value`, {
      series,
      hint: 'use a series name without control characters (newline, tab) and without a trailing backslash',
    });
  }
}

function finite(v: number): boolean {
  return typeof v === 'number' && Number.isFinite(v);
}

function toLine(point: Point): string | undefined {
  return point.toLineProtocol({ convertTime: msTime });
}

function key(measurement: string, tags: [string, string][], t: number): string {
  return `${measurement}\u0000${tags.map(([k, v]) => `${k}=${v}`).join('\u0000')}\u0000${t}`;
}

function time(t: number, series: string): number {
  if (!Number.isSafeInteger(Math.round(t))) {
    throw new StoreError('POINT_INVALID', `time ${t} is not a valid epoch-ms timestamp`, { series, hint: 'a bug upstream: times are epoch milliseconds' });
  }
  return Math.round(t);
}

/** Lines of one forecast batch: H points in the history measurement and H in the latest measurement. */
export function forecastLines(batch: ForecastBatch, m: MeasurementNames): OutLine[] {
  checkSeriesName(batch.series);
  const out: OutLine[] = [];
  for (const p of batch.points) {
    const t = time(p.t, batch.series);
    const lead = String(Math.round(p.lead));
    const hist = new Point(m.forecast).tag('series', batch.series).tag('lead', lead).timestamp(t);
    const latest = new Point(m.latest).tag('series', batch.series).timestamp(t);
    for (const pt of [hist, latest]) {
      if (finite(p.value)) pt.floatField('value', p.value);
      for (const [q, v] of Object.entries(p.bands)) if (finite(v)) pt.floatField(quantileField(q), v);
      pt.intField('issued_at', Math.round(batch.issuedAt));
    }
    latest.intField('lead', Math.round(p.lead));
    const h = toLine(hist);
    const l = toLine(latest);
    if (h) out.push({ kind: 'forecast', key: key(m.forecast, [['lead', lead], ['series', batch.series]], t), line: h });
    if (l) out.push({ kind: 'forecast', key: key(m.latest, [['series', batch.series]], t), line: l });
  }
  return out;
}

export function scoreLines(points: ScorePoint[], m: MeasurementNames): OutLine[] {
  const out: OutLine[] = [];
  for (const s of points) {
    checkSeriesName(s.series);
    const t = time(s.t, s.series);
    const lead = String(Math.round(s.lead));
    const pt = new Point(m.score).tag('series', s.series).tag('lead', lead).timestamp(t);
    for (const [name, v] of [
      ['mae', s.mae],
      ['rmse', s.rmse],
      ['mase', s.mase],
      ['bias', s.bias],
      ['coverage', s.coverage],
    ] as const) {
      if (finite(v)) pt.floatField(name, v);
    }
    if (finite(s.n)) pt.intField('n', Math.round(s.n));
    if (finite(s.season)) pt.intField('season', Math.round(s.season));
    const line = toLine(pt);
    if (line) out.push({ kind: 'score', key: key(m.score, [['lead', lead], ['series', s.series]], t), line });
  }
  return out;
}

export function healthLines(points: HealthPoint[], m: MeasurementNames): OutLine[] {
  const out: OutLine[] = [];
  for (const h of points) {
    checkSeriesName(h.series);
    const t = time(h.t, h.series);
    const pt = new Point(m.health).tag('series', h.series).timestamp(t);
    pt.stringField('state', h.state);
    pt.intField('state_code', DRIFT_STATE_CODE[h.state] ?? -1);
    for (const [name, v] of [
      ['statistic', h.statistic],
      ['recent_mase', h.recentMase],
      ['baseline_mase', h.baselineMase],
      ['novelty_share', h.noveltyShare],
    ] as const) {
      if (finite(v)) pt.floatField(name, v);
    }
    if (h.lastReadingAt !== null && finite(h.lastReadingAt)) pt.intField('last_reading_at', Math.round(h.lastReadingAt));
    const line = toLine(pt);
    if (line) out.push({ kind: 'health', key: key(m.health, [['series', h.series]], t), line });
  }
  return out;
}
