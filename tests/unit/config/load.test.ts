import { describe, expect, it } from 'vitest';
import { parseConfigText, parseConfigObject, resolveSeries, loadConfigFile } from '../../../src/config/load.ts';
import { ConfigError, formatIssue, type ConfigIssue } from '../../../src/config/errors.ts';
import { ConfigSchema } from '../../../src/config/schema.ts';
import { DRIFT_DEFAULTS } from '../../../src/drift/settings.ts';

const ok = (text: string) => {
  const r = parseConfigText(text, { baseDir: '/srv/radcast' });
  if (!r.ok) throw new Error(r.issues.map(formatIssue).join('\n'));
  return r.value;
};
const issues = (text: string): ConfigIssue[] => {
  const r = parseConfigText(text, { baseDir: '/srv/radcast' });
  if (r.ok) throw new Error('expected the config to be rejected');
  return r.issues;
};
const at = (list: ConfigIssue[], path: string) => list.filter((i) => i.path === path);

describe('config defaults and resolution', () => {
  it('a one-line config gets every default and resolves to settings in steps', () => {
    const { config, series } = ok('series: [{ name: oskaveld-north }]');
    expect(config.store.kind).toBe('embedded');
    expect(config.store.embedded.path).toBe('/srv/radcast/radcast.db');
    expect(config.state.path).toBe('/srv/radcast/radcast-state.db');
    expect(config.http).toEqual({ enabled: true, address: '127.0.0.1', port: 8787 });
    const s = series[0];
    expect(s.name).toBe('oskaveld-north');
    expect(s.settings.stepMs).toBe(3_600_000);
    expect(s.settings.features.horizon).toBe(24); // "1d" of 1h steps
    expect(s.settings.windowSteps).toBe(8 * 7 * 24); // "8w"
    expect(s.settings.features.lags).toEqual([...Array.from({ length: 24 }, (_, i) => i + 1), 168]);
    expect(s.maxLagSteps).toBe(168);
    expect(s.samples).toBe(1344 - 24 - 168 + 1);
    expect(s.source).toEqual({ name: 'oskaveld-north', measurement: 'oskaveld-north', field: 'value', tags: {} });
    expect(s.schedule).toEqual({ cron: '5 * * * *', timeZone: 'UTC' });
    expect(s.backtest).toEqual({ everySteps: 24, spanSteps: 672, origins: 28 });
    expect(s.output.name).toBe('oskaveld-north');
    expect(s.drift.dwellMs).toBe(24 * 3_600_000);
    expect(s.drift.settings).toEqual({ ...DRIFT_DEFAULTS, novelty: { ...DRIFT_DEFAULTS.novelty } }); // hourly defaults are the drift layer defaults
    expect(s.drift.webhook).toBeNull();
  });

  it('defaults apply to every series and each entry overrides any of them; sections merge key by key', () => {
    const { series } = ok(`
defaults:
  step: 15m
  timeZone: Europe/Berlin
  horizon: 1d
  window: 4w
  lags: ["1-8", "1d"]
  calendar: { holidays: { country: DE }, dayOfYear: true }
  fit: { seed: 7 }
series:
  - name: oskaveld-north
  - name: brennick-yard
    step: 1h
    lags: [1, 2, 3]
    calendar: { hourOfDay: false }
    fit: { restarts: 5 }
`);
    const [a, b] = series;
    expect(a.settings.stepMs).toBe(900_000);
    expect(a.settings.features.horizon).toBe(96);
    expect(a.settings.features.lags).toEqual([1, 2, 3, 4, 5, 6, 7, 8, 96]);
    expect(a.settings.features.timeZone).toBe('Europe/Berlin');
    expect(b.settings.stepMs).toBe(3_600_000);
    expect(b.settings.features.horizon).toBe(24);
    expect(b.settings.features.lags).toEqual([1, 2, 3]);
    // calendar merged: own hourOfDay, inherited holidays and dayOfYear
    expect(b.settings.features.calendar).toMatchObject({ hourOfDay: false, dayOfYear: true, holidays: { country: 'DE' } });
    expect(b.settings.fit).toMatchObject({ restarts: 5, seed: 7 });
  });

  it('exogenous inputs use the selector of a configured series and accept at-target use only then', () => {
    const { series } = ok(`
defaults: { window: 4w }
series:
  - name: tarrow-hill
    exogenous:
      - { name: oskaveld-outdoor-temp, lags: ["1-3"], atTarget: true }
      - { name: wind, source: { measurement: weather, field: speed, tags: { site: ridge } } }
  - name: oskaveld-outdoor-temp
    source: { measurement: weather, field: temp_c }
`);
    const ex = series[0].exogenous;
    expect(ex[0]).toMatchObject({ name: 'oskaveld-outdoor-temp', configured: true, atTarget: true, lags: [1, 2, 3] });
    expect(ex[0].source).toMatchObject({ measurement: 'weather', field: 'temp_c' });
    expect(ex[1]).toMatchObject({ name: 'wind', configured: false, lags: Array.from({ length: 24 }, (_, i) => i + 1) });
    expect(ex[1].source).toEqual({ name: 'wind', measurement: 'weather', field: 'speed', tags: { site: 'ridge' } });
    expect(series[0].settings.features.exogenous[0]).toEqual({ name: 'oskaveld-outdoor-temp', lags: [1, 2, 3], atTarget: true });
  });

  it('resolveSeries on a parsed config gives the same result as the loader', () => {
    const loaded = ok('series: [{ name: a, centres: auto, ridge: auto, widthMode: auto }]');
    const raw = ConfigSchema.parse({ series: [{ name: 'a', centres: 'auto', ridge: 'auto', widthMode: 'auto' }] });
    const again = resolveSeries(raw);
    expect(again[0].settings).toEqual(loaded.series[0].settings);
    expect(again[0].settings.fit).toMatchObject({ nCentres: 'auto', ridge: 'auto', widthMode: 'auto' });
  });

  it('aggregate "step" pushes the step down; a window longer than the step is refused', () => {
    expect(ok('series: [{ name: a, step: 15m, source: { aggregate: step } }]').series[0].source.aggregateMs).toBe(900_000);
    expect(ok('series: [{ name: a, step: 15m, source: { aggregate: 5m } }]').series[0].source.aggregateMs).toBe(300_000);
    expect(at(issues('series: [{ name: a, step: 15m, source: { aggregate: 1h } }]'), 'series[0].source.aggregate')[0].code).toBe('CONFIG_COMBINATION');
  });
});

describe('config errors carry the key path and a hint, and list every issue', () => {
  it('an unknown key is reported at its path with a suggestion', () => {
    const list = issues('series: [{ name: a, horizn: 24 }]');
    expect(list).toHaveLength(1);
    expect(list[0]).toMatchObject({ code: 'CONFIG_UNKNOWN_KEY', path: 'series[0].horizn', series: 'a' });
    expect(list[0].hint).toContain('did you mean "horizon"');
  });

  it('a wrong type names what was expected and what came', () => {
    const list = issues('http: { port: "eighty" }\nseries: [{ name: a }]');
    expect(list[0]).toMatchObject({ code: 'CONFIG_TYPE', path: 'http.port' });
    expect(list[0].message).toContain('expected number');
    expect(list[0].message).toContain('"eighty"');
    expect(list[0].hint).toContain('TCP port');
  });

  it('a value inherited from defaults is reported at defaults.*, once, not per series', () => {
    const list = issues(`
defaults: { widthMode: wide, lagz: [1] }
series: [{ name: a }, { name: b }, { name: c, widthMode: shared }]
`);
    expect(at(list, 'defaults.widthMode')).toHaveLength(1);
    expect(at(list, 'defaults.lagz')).toHaveLength(1);
    expect(list.every((i) => i.path.startsWith('defaults'))).toBe(true);
  });

  it('one pass lists every issue: schema errors of one series and combination errors of another', () => {
    const list = issues(`
store: { kind: influxdb, influxdb: { api: v1 } }
series:
  - { name: a, step: 1h, window: 100, lags: ["1-24", 168] }
  - { name: b, step: fortnightly, centres: 0 }
  - { name: c, refit: "61 * * * *", timeZone: Mars/Olympus, quantiles: [0.1, 1.5] }
`);
    const paths = list.map((i) => i.path);
    expect(paths).toEqual(expect.arrayContaining([
      'store.influxdb.database',
      'series[0].window',
      'series[1].step',
      'series[1].centres',
      'series[2].refit',
      'series[2].timeZone',
      'series[2].quantiles[1]',
    ]));
    for (const i of list) {
      expect(i.message.length).toBeGreaterThan(5);
      expect(i.hint.length).toBeGreaterThan(3);
    }
  });

  it('window shorter than the longest lag plus the horizon is impossible, with the needed length as hint', () => {
    const [i] = at(issues('series: [{ name: a, window: 100, lags: ["1-24", 168] }]'), 'series[0].window');
    expect(i.code).toBe('CONFIG_COMBINATION');
    expect(i.message).toContain('longest lag (168)');
    expect(i.message).toContain('horizon (24)');
    expect(i.hint).toContain('192 steps');
  });

  it('the season counts as a lag when seasonal inputs are on', () => {
    // lags up to 3, horizon 24, season 1w = 168 steps -> needs 168 + 24 = 192
    expect(at(issues('series: [{ name: a, window: 150, lags: [1, 2, 3], season: 1w }]'), 'series[0].window')).toHaveLength(1);
    expect(ok('series: [{ name: a, window: 150, lags: [1, 2, 3], season: 1w, seasonalInputs: false, centres: 8 }]').series[0].maxLagSteps).toBe(3);
  });

  it('more centres than the window gives training samples is impossible', () => {
    // window 60, horizon 24, lags 1..24 (season 24): samples 60-24-24+1 = 13, training 13*(1-0.2) -> 10
    const [i] = at(issues('series: [{ name: a, window: 60, lags: ["1-24"], centres: 11 }]'), 'series[0].centres');
    expect(i.code).toBe('CONFIG_COMBINATION');
    expect(i.message).toContain('10 training samples');
    expect(ok('series: [{ name: a, window: 60, lags: ["1-24"], centres: 10 }]').series[0].samples).toBe(13);
  });

  it('season shorter than the horizon with seasonal inputs is impossible', () => {
    const list = issues('series: [{ name: a, season: 12h, horizon: 1d }]');
    expect(at(list, 'series[0].seasonalInputs')[0].code).toBe('CONFIG_COMBINATION');
  });

  it('durations that are not whole steps are refused with a rounded suggestion', () => {
    const [i] = at(issues('series: [{ name: a, step: 1h, horizon: 90m }]'), 'series[0].horizon');
    expect(i.message).toContain('not a whole number of steps');
    expect(i.hint).toMatch(/"(1h|2h)"/);
  });

  it('duplicate names, self-reference and at-target on an unknown input are refused', () => {
    const list = issues(`
series:
  - { name: a, exogenous: [{ name: a }, { name: temp, atTarget: true }] }
  - { name: a }
`);
    expect(at(list, 'series[1].name')[0].message).toContain('used twice');
    expect(at(list, 'series[0].exogenous[0].name')[0].code).toBe('CONFIG_COMBINATION');
    expect(at(list, 'series[0].exogenous[1].atTarget')[0].hint).toContain('add "temp"');
  });

  it('holiday country and state are checked against date-holidays', () => {
    expect(at(issues('series: [{ name: a, calendar: { holidays: { country: QQ } } }]'), 'series[0].calendar.holidays.country')).toHaveLength(1);
    const [s] = at(issues('series: [{ name: a, calendar: { holidays: { country: DE, state: ZZ } } }]'), 'series[0].calendar.holidays.state');
    expect(s.hint).toContain('BY'); // Bavaria is a German state in the date-holidays data
    expect(ok('series: [{ name: a, calendar: { holidays: { country: DE, state: BY } } }]').series[0].settings.features.calendar.holidays).toEqual({ country: 'DE', state: 'BY' });
  });

  it('cron expressions are validated by node-cron', () => {
    expect(ok('series: [{ name: a, refit: "*/15 * * * *" }]').series[0].schedule.cron).toBe('*/15 * * * *');
    expect(ok('series: [{ name: a, refit: "0 30 6 * * 1-5" }]').series[0].schedule.cron).toBe('0 30 6 * * 1-5');
    expect(at(issues('series: [{ name: a, refit: "every hour" }]'), 'series[0].refit')).toHaveLength(1);
  });

  it('influxdb v2 needs org, bucket and a token source; both env and file is ambiguous', () => {
    const list = issues('store: { kind: influxdb, influxdb: { api: v2, tokenEnv: T, tokenFile: t.txt } }\nseries: [{ name: a }]');
    expect(list.map((i) => i.path)).toEqual(expect.arrayContaining(['store.influxdb.org', 'store.influxdb.bucket', 'store.influxdb.tokenFile']));
    const good = ok('store: { kind: influxdb, influxdb: { api: v2, org: oskaveld, bucket: heat, tokenFile: secrets/token } }\nseries: [{ name: a }]');
    expect(good.config.store.influxdb?.tokenFile).toBe('/srv/radcast/secrets/token');
  });

  it('a token written into the file is an unknown key, not a secret', () => {
    const list = issues('store: { kind: influxdb, influxdb: { api: v2, org: o, bucket: b, token: abc123 } }\nseries: [{ name: a }]');
    expect(at(list, 'store.influxdb.token')[0].code).toBe('CONFIG_UNKNOWN_KEY');
    expect(JSON.stringify(list)).not.toContain('abc123');
  });

  it('YAML syntax errors and duplicate keys name the line', () => {
    const list = issues('series:\n  - name: a\n    step: 1h\n    step: 2h\n');
    expect(list[0].code).toBe('CONFIG_YAML');
    expect(list[0].line).toBe(4);
    expect(issues('series: [ { name: a }\n')[0].code).toBe('CONFIG_YAML');
  });

  it('an empty file, a list and no series are refused without a crash', () => {
    expect(issues('')[0].message).toContain('empty file');
    expect(issues('- a\n- b')[0].code).toBe('CONFIG_TYPE');
    expect(issues('series: []')[0].path).toBe('series');
    expect(issues('store: {}')[0]).toMatchObject({ path: 'series', code: 'CONFIG_TYPE' });
  });

  it('a missing file is CONFIG_READ with the path', () => {
    const r = loadConfigFile('/nonexistent/radcast.yaml');
    expect(r.ok).toBe(false);
    if (!r.ok) expect(r.issues[0]).toMatchObject({ code: 'CONFIG_READ' });
  });

  it('resolveSeries throws a ConfigError carrying every issue', () => {
    const cfg = ConfigSchema.parse({ series: [{ name: 'a', window: 10 }, { name: 'b', window: 20 }] });
    try {
      resolveSeries(cfg);
      expect.unreachable();
    } catch (e) {
      expect(e).toBeInstanceOf(ConfigError);
      expect((e as ConfigError).issues.map((i) => i.path)).toEqual(['series[0].window', 'series[1].window']);
    }
  });

  it('random garbage objects never throw, they give issues', () => {
    const samples: unknown[] = [42, 'x', [1, 2], { series: 'x' }, { series: [null, 3, 'a'] }, { defaults: [], series: [{ name: 'a' }] }, { series: [{ name: 'a', lags: [] }] }, { series: [{ name: 'a', window: -5 }] }, { series: [{ name: 'a', horizon: 1e300 }] }];
    for (const s of samples) {
      const r = parseConfigObject(s);
      expect(r.ok).toBe(false);
    }
  });
});

describe('drift settings', () => {
  it('map one to one onto the drift layer settings, durations in the series step', () => {
    const { series } = ok(`
series:
  - name: a
    step: 15m
    drift:
      detector: { allowance: 0.5, watchThreshold: 4, alertThreshold: 8, recoveryThreshold: 3, batch: 6h, spreadPrior: 0.2, clipRatio: 4, raiseAfter: 2 }
      dwell: 12h
      novelty: { activation: 0.1, share: 0.5, window: 2h }
      staleAfter: 1h
      webhook: { urlEnv: HOOK, resendEvery: 2h }
`);
    expect(series[0].drift.settings).toEqual({
      allowance: 0.5, watchThreshold: 4, alertThreshold: 8, recoveryThreshold: 3, batchSteps: 24, spreadPrior: 0.2, clipRatio: 4, raiseAfterSteps: 2, dwellSteps: 48,
      novelty: { activation: 0.1, share: 0.5, windowSteps: 8 }, staleAfterMs: 3_600_000, repeatAlertMs: 7_200_000,
    });
    expect(series[0].drift.webhook).toEqual({ resendEveryMs: 7_200_000, timeoutMs: 10_000 });
  });

  it('the drift layer check runs on the resolved values, reported at the config keys', () => {
    const list = issues('series: [{ name: a, drift: { detector: { watchThreshold: 12 }, webhook: { urlEnv: A, urlFile: b } } }]');
    expect(at(list, 'series[0].drift.detector.watchThreshold')[0].code).toBe('CONFIG_COMBINATION');
    expect(at(list, 'series[0].drift.webhook')[0].hint).toContain('exactly one');
  });
});
