import { describe, expect, it } from 'vitest';
import { forecastLines, healthLines, quantileField, scoreLines, checkSeriesName } from '../../../src/store/influx/schema.ts';
import { INFLUX_DEFAULTS } from '../../../src/store/influx/options.ts';
import { StoreError } from '../../../src/store/influx/errors.ts';
import type { ForecastBatch } from '../../../src/store/types.ts';

const M = INFLUX_DEFAULTS.measurements;
const H = 3_600_000;
const T0 = Date.UTC(2026, 0, 12, 6); // forecast origin, a Monday 07:00 Europe/Berlin

const batch: ForecastBatch = {
  series: 'oskaveld-north',
  issuedAt: T0,
  stepMs: H,
  points: [
    { t: T0 + H, lead: 1, value: 812.5, bands: { '0.1': 790.25, '0.9': 840 } },
    { t: T0 + 2 * H, lead: 2, value: 798, bands: { '0.1': 771, '0.9': NaN } },
  ],
};

describe('output schema (line protocol)', () => {
  it('writes each forecast step to the history (tags series+lead) and to the latest measurement (tag series)', () => {
    const lines = forecastLines(batch, M).map((l) => l.line);
    // Line protocol: measurement,tag_set field_set timestamp; integers end in "i"; the client's Point sorts tags and fields by key
    // (InfluxDB line protocol reference, docs.influxdata.com; from memory).
    expect(lines).toEqual([
      `radcast_forecast,lead=1,series=oskaveld-north issued_at=${T0}i,q10=790.25,q90=840,value=812.5 ${T0 + H}`,
      `radcast_forecast_latest,series=oskaveld-north issued_at=${T0}i,lead=1i,q10=790.25,q90=840,value=812.5 ${T0 + H}`,
      `radcast_forecast,lead=2,series=oskaveld-north issued_at=${T0}i,q10=771,value=798 ${T0 + 2 * H}`,
      `radcast_forecast_latest,series=oskaveld-north issued_at=${T0}i,lead=2i,q10=771,value=798 ${T0 + 2 * H}`,
    ]);
  });

  it('gives a rewrite of the same forecast the same point keys (so it overwrites) and a later issue a different time, not a new tag', () => {
    const a = forecastLines(batch, M);
    const b = forecastLines({ ...batch, points: batch.points.map((p) => ({ ...p, value: p.value + 1 })) }, M);
    expect(b.map((l) => l.key)).toEqual(a.map((l) => l.key));
    const next = forecastLines({ ...batch, issuedAt: T0 + H, points: [{ t: T0 + 2 * H, lead: 1, value: 1, bands: {} }] }, M);
    // The latest measurement at T0+2h is the same point as before (overwritten by the newer issue) ...
    expect(next.find((l) => l.line.startsWith('radcast_forecast_latest'))!.key).toBe(a[3]!.key);
    // ... while the history keeps lead 2 and lead 1 for that target time apart.
    expect(next.find((l) => l.line.startsWith('radcast_forecast,'))!.key).not.toBe(a[2]!.key);
    // No tag carries the issue time or a run id: only series and lead.
    for (const l of [...a, ...next]) expect(l.line.split(' ')[0]!.split(',').slice(1).map((t) => t.split('=')[0]).sort()).toEqual(expect.arrayContaining(['series']));
    for (const l of [...a, ...next]) for (const tag of l.line.split(' ')[0]!.split(',').slice(1)) expect(['series', 'lead']).toContain(tag.split('=')[0]);
  });

  it('names band fields by percent', () => {
    expect(['0.1', '0.9', '0.5', '0.025', '0.975', '0.05'].map(quantileField)).toEqual(['q10', 'q90', 'q50', 'q2_5', 'q97_5', 'q5']);
    expect(quantileField('lower')).toBe('q_lower');
  });

  it('escapes tag values as line protocol requires (comma, equals sign, space)', () => {
    const [line] = forecastLines({ ...batch, series: 'brennick yard,a=b', points: [batch.points[0]!] }, M);
    expect(line!.line.split(' issued_at')[0]).toBe('radcast_forecast,lead=1,series=brennick\\ yard\\,a\\=b');
  });

  it('refuses series names a tag value cannot carry', () => {
    for (const bad of ['', 'a\nb', 'tab\there', 'ends\\']) {
      try {
        checkSeriesName(bad);
        expect.fail(`accepted ${JSON.stringify(bad)}`);
      } catch (err) {
        expect(err).toBeInstanceOf(StoreError);
        expect((err as StoreError).code).toBe('SERIES_NAME_INVALID');
        expect((err as StoreError).canRetry()).toBe(false);
      }
    }
    expect(() => forecastLines({ ...batch, series: 'x\n' }, M)).toThrow(/cannot be written/);
  });

  it('writes scores with integer counts and leaves out non-finite metrics', () => {
    const [s] = scoreLines([{ series: 'tarrow-hill', t: T0, lead: 0, mae: 12.5, rmse: 15, mase: NaN, bias: -1.5, coverage: 0.8, n: 168, season: 24 }], M);
    expect(s!.line).toBe(`radcast_score,lead=0,series=tarrow-hill bias=-1.5,coverage=0.8,mae=12.5,n=168i,rmse=15,season=24i ${T0}`);
  });

  it('writes health with the state as string and as integer code', () => {
    const lines = healthLines(
      [
        { series: 'tarrow-hill', t: T0, state: 'alert', statistic: 7.25, recentMase: 1.9, baselineMase: 0.7, noveltyShare: 0.3, lastReadingAt: T0 - H },
        { series: 'tarrow-hill', t: T0 + H, state: 'stale', statistic: 0, recentMase: NaN, baselineMase: 0.7, noveltyShare: 0, lastReadingAt: null },
      ],
      M,
    ).map((l) => l.line);
    expect(lines).toEqual([
      `radcast_health,series=tarrow-hill baseline_mase=0.7,last_reading_at=${T0 - H}i,novelty_share=0.3,recent_mase=1.9,state="alert",state_code=2i,statistic=7.25 ${T0}`,
      `radcast_health,series=tarrow-hill baseline_mase=0.7,novelty_share=0,state="stale",state_code=3i,statistic=0 ${T0 + H}`,
    ]);
  });

  it('uses configured measurement names', () => {
    const lines = forecastLines(batch, { forecast: 'fc', latest: 'fc_now', score: 'sc', health: 'hl' });
    expect(lines.map((l) => l.line.split(',')[0])).toEqual(['fc', 'fc_now', 'fc', 'fc_now']);
  });
});
