/**
 * The full daemon cycle in v1 mode against a real InfluxDB 1.x: the demo readings of
 * oskaveld-north are written into influxd, `radcast once` runs twice a day apart (the second run
 * scores the first run's forecast), and everything radcast wrote is read back with InfluxQL and
 * compared with what the embedded store holds after the same two runs on the same readings.
 * A third run at the same time rewrites the same points: no duplicates.
 *
 * `radcast once` runs in this process (runCli) rather than as a child process, to keep the file
 * fast on a two-core machine; it builds its own stores from the config exactly as the binary does.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { runCli } from '../../src/cli/main.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';

const SERIES = 'oskaveld-north';
const CSV = resolve(import.meta.dirname, '../../demo-data/oskaveld-north.csv');
const T1 = '2025-11-20T06:05:00+01:00';
const T2 = '2025-11-21T06:05:00+01:00';
const H = 3_600_000;

let influx: Influx1Server;
let dir: string;

const modelSection = `
daemon:
  concurrency: 1
defaults:
  step: 1h
  timeZone: Europe/Berlin
  horizon: 1d
  window: 3w
  season: 1d
  lags: ["1-24"]
  centres: 12
  widthMode: shared
  ridge: 0.001
  targetMode: level
  calendar:
    holidays:
      country: DE
  quantiles: [0.1, 0.9]
series:
  - name: ${SERIES}
    source:
      measurement: heat
      field: load_kw
      tags: { substation: ${SERIES} }
      aggregate: step
`;

async function cli(args: string[]): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await runCli(args, { out: (s: string) => void (out += s), err: (s: string) => void (err += s) }, {}, dir);
  return { code, out, err };
}

async function once(config: string, at: string): Promise<Record<string, unknown>> {
  const r = await cli(['once', '--config', config, '--at', at, '--json', '--workers', '0', '--log-level', 'silent']);
  expect(r.err).toBe('');
  expect(r.code).toBe(0);
  const sum = JSON.parse(r.out) as { ok: number; results: { outcome: string }[] };
  expect(sum.ok).toBe(1);
  return sum as unknown as Record<string, unknown>;
}

async function influxRows(q: string): Promise<unknown[][]> {
  return (await influx.query(q, 'oskaveld')).results[0]?.series?.flatMap((s) => s.values) ?? [];
}

/** CSV timestamp,value -> line protocol of measurement heat (the source of the influx config). */
function csvLines(): string[] {
  return readFileSync(CSV, 'utf8')
    .trim()
    .split('\n')
    .slice(1)
    .filter((l) => l.split(',')[1] !== '')
    .map((l) => {
      const [ts, v] = l.split(',');
      return `heat,substation=${SERIES} load_kw=${v} ${Date.parse(ts!)}`;
    });
}

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-influx-daemon-'));
  influx = await startInflux1();
  await influx.query('CREATE DATABASE oskaveld');
  const lines = csvLines();
  for (let i = 0; i < lines.length; i += 5_000) await influx.writeLines('oskaveld', lines.slice(i, i + 5_000));
  writeFileSync(join(dir, 'embedded.yaml'), `store:\n  kind: embedded\n  embedded:\n    path: embedded.db\nstate:\n  path: embedded-state.db\n${modelSection}`);
  writeFileSync(
    join(dir, 'influx.yaml'),
    `store:\n  kind: influxdb\n  influxdb:\n    url: ${influx.url}\n    api: v1\n    database: oskaveld\n    flushInterval: 100ms\nstate:\n  path: influx-state.db\n${modelSection}`,
  );
  const imported = await cli(['import', CSV, '--series', SERIES, '--config', 'embedded.yaml']);
  expect(imported.code).toBe(0);
}, 120_000);

afterAll(async () => {
  await influx?.close();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('radcast once against InfluxDB 1.x (v1)', () => {
  it('writes the same forecasts, bands, scores and health as the embedded store; a rerun adds no duplicates', async () => {
    await once('embedded.yaml', T1);
    await once('embedded.yaml', T2);
    await once('influx.yaml', T1);
    const second = await once('influx.yaml', T2);
    expect((second.results as { scored: number }[])[0]!.scored).toBe(24);

    const emb = new EmbeddedStore({ path: join(dir, 'embedded.db') });
    try {
      // Forecast history: both issues, every lead, value and both band quantiles.
      const hist = await emb.readForecastHistory(SERIES);
      expect(hist.length).toBe(48);
      const ihist = await influxRows(`SELECT "value", "q10", "q90", "issued_at", "lead" FROM "radcast_forecast" WHERE "series" = '${SERIES}'`);
      expect(ihist.length).toBe(48);
      const byKey = new Map(ihist.map((r) => [`${r[5]}@${r[0]}`, r]));
      for (const p of hist) {
        const r = byKey.get(`${p.lead}@${p.t}`);
        expect(r, `lead ${p.lead} t ${p.t}`).toBeDefined();
        expect(r![1] as number).toBeCloseTo(p.value, 9);
        expect(r![2] as number).toBeCloseTo(p.bands['0.1']!, 9);
        expect(r![3] as number).toBeCloseTo(p.bands['0.9']!, 9);
        expect(r![4]).toBe(p.issuedAt);
      }

      // Latest: the second issue's 24 steps.
      const latest = (await emb.readLatestForecast(SERIES))!;
      const ilatest = await influxRows(`SELECT "value", "q10", "q90", "lead" FROM "radcast_forecast_latest" WHERE "series" = '${SERIES}' AND "issued_at" = ${latest.issuedAt}`);
      expect(ilatest.map((r) => [r[0], r[4]])).toEqual(latest.points.map((p) => [p.t, p.lead]));
      for (const [k, p] of latest.points.entries()) expect(ilatest[k]![1] as number).toBeCloseTo(p.value, 9);
      // The issues are a day apart, so their target times do not overlap: the first stays as it was.
      expect(await influxRows(`SELECT count("value") FROM "radcast_forecast_latest" WHERE "series" = '${SERIES}'`)).toEqual([[0, 48]]);

      // Scores: overall (lead 0) and per lead.
      const scores = await emb.readScores(SERIES);
      expect(scores.length).toBe(25);
      const iscores = await influxRows(`SELECT "mae", "rmse", "mase", "bias", "coverage", "n", "season", "lead" FROM "radcast_score" WHERE "series" = '${SERIES}'`);
      expect(iscores.length).toBe(25);
      const sByLead = new Map(iscores.map((r) => [Number(r[8]), r]));
      for (const s of scores) {
        const r = sByLead.get(s.lead)!;
        expect(r[0]).toBe(s.t);
        for (const [i, v] of [s.mae, s.rmse, s.mase, s.bias, s.coverage].entries()) {
          if (Number.isFinite(v)) expect(r[i + 1] as number).toBeCloseTo(v, 9);
          else expect(r[i + 1]).toBeNull();
        }
        expect([r[6], r[7]]).toEqual([s.n, s.season]);
      }

      // Health: one point per run.
      const health = await emb.readHealth(SERIES);
      const ihealth = await influxRows(`SELECT "state", "state_code", "statistic", "baseline_mase", "last_reading_at" FROM "radcast_health" WHERE "series" = '${SERIES}'`);
      expect(ihealth.map((r) => [r[0], r[1]])).toEqual(health.map((h) => [h.t, h.state]));
      for (const [k, h] of health.entries()) {
        expect(ihealth[k]![2]).toBe({ ok: 0, watch: 1, alert: 2, stale: 3 }[h.state]);
        expect(ihealth[k]![3] as number).toBeCloseTo(h.statistic, 9);
        expect(ihealth[k]![5]).toBe(h.lastReadingAt);
      }
    } finally {
      await emb.close();
    }

    // Run the second cycle again: every point it writes overwrites itself.
    const counts = async () =>
      Promise.all(
        ['radcast_forecast', 'radcast_forecast_latest', 'radcast_score', 'radcast_health'].map(async (m) => (await influxRows(`SELECT count(*) FROM "${m}"`))[0]?.slice(1)),
      );
    const before = await counts();
    await once('influx.yaml', T2);
    expect(await counts()).toEqual(before);
    expect(before[0]).toEqual([48, 48, 48, 48]);
  });

  it('the forecast starts after the last reading before the cycle time', async () => {
    const lastIssue = (await influxRows(`SELECT max("issued_at") FROM "radcast_forecast"`))[0]![1] as number;
    expect(lastIssue).toBeLessThanOrEqual(Date.parse(T2));
    expect(Date.parse(T2) - lastIssue).toBeLessThan(2 * H);
  });
});
