/**
 * From a parsed config to one ResolvedSeries per series entry: durations become steps / ms, lag
 * lists are expanded, and the combinations the schema alone cannot see are checked (window too
 * short for lags + horizon, more centres than samples, season shorter than the horizon, ...).
 * Every problem found is returned; nothing throws here.
 */
import Holidays from 'date-holidays';
import type { ForecastSettings } from '../forecast/types.ts';
import { checkDriftSettings, DRIFT_DEFAULTS, type DriftSettings } from '../drift/settings.ts';
import type { SourceSelector } from '../store/types.ts';
import type { Config, SeriesEntry } from './schema.ts';
import type { ConfigIssue, ConfigIssueCode } from './errors.ts';
import { expandLags, formatDurationMs, parseDurationMs, toSteps } from './duration.ts';

/** Longest training window one refit can hold (steps). */
export const MAX_WINDOW_STEPS = 1_000_000;

export interface ResolvedExogenous {
  name: string;
  /** Selector to read it with: the configured series' own selector, its explicit `source`, or just the name. */
  source: SourceSelector;
  /** True when the input is itself a configured series (so a forecast of it exists). */
  configured: boolean;
  lags: number[];
  atTarget: boolean;
}

export interface ResolvedDrift {
  enabled: boolean;
  /** The drift layer's settings, every field from the config (src/drift/settings.ts). */
  settings: DriftSettings;
  /** @deprecated same as settings.allowance. */
  delta: number;
  watchThreshold: number;
  alertThreshold: number;
  /** settings.dwellSteps * stepMs. */
  dwellMs: number;
  novelty: { activation: number; share: number; windowSteps: number };
  staleAfterMs: number;
  /** Webhook timing; the URL itself is a secret, read through Secrets.webhookUrl(series). null = no webhook. */
  webhook: { resendEveryMs: number; timeoutMs: number } | null;
}

/** Everything the daemon, backtest and tune need for one series. */
export interface ResolvedSeries {
  name: string;
  /** Position in the config's series list. */
  index: number;
  settings: ForecastSettings;
  source: SourceSelector;
  exogenous: ResolvedExogenous[];
  /** Longest input reach back from an origin, in steps (lags, exogenous lags, season when seasonal inputs/target are used). */
  maxLagSteps: number;
  /** Training samples the window gives: windowSteps - horizon - maxLagSteps + 1. */
  samples: number;
  /** Span of readings one refit reads before the origin: windowSteps * stepMs. */
  readSpanMs: number;
  schedule: { cron: string; timeZone: string };
  backtest: { everySteps: number; spanSteps: number; origins: number };
  drift: ResolvedDrift;
  output: { name: string };
}

/** An issue whose path is still in segments (load.ts maps it to the key that set the value). */
export interface RawIssue extends Omit<ConfigIssue, 'path'> {
  segments: (string | number)[];
}

let holidayCatalog: Holidays | undefined;
function holidays(): Holidays {
  holidayCatalog ??= new Holidays();
  return holidayCatalog;
}

function sourceSelector(name: string, src: SeriesEntry['source'], stepMs: number, at: (string | number)[], issues: RawIssue[], series: string): SourceSelector {
  let aggregateMs: number | undefined;
  if (src.aggregate === 'step') aggregateMs = stepMs;
  else if (src.aggregate !== 'none') {
    const d = parseDurationMs(src.aggregate);
    if (d.ok) {
      if (d.value > stepMs) {
        issues.push({ code: 'CONFIG_COMBINATION', segments: [...at, 'aggregate'], series, message: `aggregate window ${src.aggregate} is longer than the step ${formatDurationMs(stepMs)}`, hint: 'use "step" or a window no longer than the step' });
      } else aggregateMs = d.value;
    }
  }
  const sel: SourceSelector = { name, measurement: src.measurement ?? name, field: src.field, tags: { ...src.tags } };
  if (aggregateMs !== undefined) sel.aggregateMs = aggregateMs;
  return sel;
}

/** Resolves every series; returns the resolved list and all issues (empty = valid). */
export function resolveAll(config: Config, indices?: readonly number[]): { series: ResolvedSeries[]; issues: RawIssue[] } {
  const issues: RawIssue[] = [];
  const out: ResolvedSeries[] = [];
  const byName = new Map<string, SeriesEntry>();
  const pos = (k: number) => (indices ? indices[k] : k);
  config.series.forEach((s, k) => {
    const i = pos(k);
    if (byName.has(s.name)) {
      issues.push({ code: 'CONFIG_VALUE', segments: ['series', i, 'name'], series: s.name, message: `series name "${s.name}" is used twice`, hint: 'series names must be unique' });
    } else byName.set(s.name, s);
  });
  const outputNames = new Map<string, number>();

  config.series.forEach((s, k) => {
    const i = pos(k);
    const at = (...p: (string | number)[]) => ['series', i, ...p];
    const push = (code: ConfigIssueCode, p: (string | number)[], message: string, hint: string) => issues.push({ code, segments: at(...p), series: s.name, message, hint });
    const before = issues.length;

    const stepMs = parseDurationMs(s.step);
    if (!stepMs.ok) {
      push('CONFIG_VALUE', ['step'], stepMs.message, stepMs.hint);
      return;
    }
    const step = stepMs.value;
    const steps = (v: number | string, key: (string | number)[], what: string, min: number): number => {
      const r = toSteps(v, step, what);
      if (!r.ok) {
        push('CONFIG_VALUE', key, r.message, r.hint);
        return NaN;
      }
      if (r.value < min) {
        push('CONFIG_VALUE', key, `${what} is ${r.value} steps, at least ${min} needed`, `give at least ${min} step(s) of ${s.step}`);
        return NaN;
      }
      return r.value;
    };
    const horizon = steps(s.horizon, ['horizon'], 'horizon', 1);
    let windowSteps = steps(s.window, ['window'], 'window', 1);
    if (windowSteps > MAX_WINDOW_STEPS) {
      // One refit holds the window several times over (grid, features, design matrix): beyond this it runs out of memory.
      push('CONFIG_VALUE', ['window'], `window is ${windowSteps} steps; at most ${MAX_WINDOW_STEPS} are supported`, `shorten the window or use a longer step (e.g. 8 weeks of 5-second readings is ${8 * 7 * 24 * 720} steps)`);
      windowSteps = NaN;
    }
    const seasonSteps = steps(s.season, ['season'], 'season', 1);
    const maxFillSteps = steps(s.regularize.maxFill, ['regularize', 'maxFill'], 'regularize.maxFill', 0);
    const everySteps = steps(s.backtest.every, ['backtest', 'every'], 'backtest.every', 1);
    const spanSteps = steps(s.backtest.span, ['backtest', 'span'], 'backtest.span', 1);
    const noveltyWindow = steps(s.drift.novelty.window, ['drift', 'novelty', 'window'], 'drift.novelty.window', 1);
    const dwellSteps = steps(s.drift.dwell, ['drift', 'dwell'], 'drift.dwell', 0);
    const staleSteps = steps(s.drift.staleAfter, ['drift', 'staleAfter'], 'drift.staleAfter', 1);
    const batchSteps = steps(s.drift.detector.batch, ['drift', 'detector', 'batch'], 'drift.detector.batch', 1);
    const raiseSteps = steps(s.drift.detector.raiseAfter, ['drift', 'detector', 'raiseAfter'], 'drift.detector.raiseAfter', 1);
    const resendSteps = s.drift.webhook ? steps(s.drift.webhook.resendEvery, ['drift', 'webhook', 'resendEvery'], 'drift.webhook.resendEvery', 0) : 0;

    const lagsR = expandLags(s.lags, step);
    const lags = lagsR.ok ? lagsR.value : [];
    if (!lagsR.ok) push('CONFIG_VALUE', ['lags'], lagsR.message, lagsR.hint);

    const exogenous: ResolvedExogenous[] = [];
    const seenExo = new Set<string>();
    s.exogenous.forEach((e, j) => {
      if (e.name === s.name) push('CONFIG_COMBINATION', ['exogenous', j, 'name'], `series "${s.name}" lists itself as an exogenous input`, 'its own history enters through lags');
      if (seenExo.has(e.name)) push('CONFIG_VALUE', ['exogenous', j, 'name'], `exogenous input "${e.name}" is listed twice`, 'list each input once, with all its lags');
      seenExo.add(e.name);
      const l = expandLags(e.lags, step);
      if (!l.ok) push('CONFIG_VALUE', ['exogenous', j, 'lags'], l.message, l.hint);
      const other = byName.get(e.name);
      if (e.atTarget && !other) {
        push('CONFIG_COMBINATION', ['exogenous', j, 'atTarget'], `atTarget needs a forecast of "${e.name}", which is not a configured series`, `add "${e.name}" to the series list or set atTarget: false`);
      }
      if (other && e.source) {
        push('CONFIG_COMBINATION', ['exogenous', j, 'source'], `"${e.name}" is a configured series; its own source is used`, 'remove this source, or change the source of that series');
      }
      let source: SourceSelector;
      if (other) {
        const os = parseDurationMs(other.step);
        source = sourceSelector(other.name, other.source, os.ok ? os.value : step, at('exogenous', j), [], s.name);
      } else if (e.source) {
        source = sourceSelector(e.name, e.source, step, at('exogenous', j, 'source'), issues, s.name);
      } else {
        source = { name: e.name, measurement: e.name, field: 'value', tags: {} };
      }
      exogenous.push({ name: e.name, source, configured: !!other, lags: l.ok ? l.value : [], atTarget: e.atTarget });
    });

    const usesSeason = s.seasonalInputs || s.targetMode === 'seasonal';
    if (usesSeason && seasonSteps < horizon) {
      const key = s.targetMode === 'seasonal' ? 'targetMode' : 'seasonalInputs';
      push('CONFIG_COMBINATION', [key], `season of ${seasonSteps} steps is shorter than the horizon of ${horizon} steps: the value one season before a far target step lies in the future`, 'lengthen season (e.g. "1w"), shorten the horizon, or turn off seasonalInputs / seasonal targetMode');
    }

    let maxLag = lags.length ? lags[lags.length - 1] : 0;
    for (const e of exogenous) if (e.lags.length) maxLag = Math.max(maxLag, e.lags[e.lags.length - 1]);
    if (usesSeason && Number.isFinite(seasonSteps)) maxLag = Math.max(maxLag, seasonSteps);

    const samples = windowSteps - horizon - maxLag + 1;
    if (Number.isFinite(samples) && samples < 1) {
      push('CONFIG_COMBINATION', ['window'], `window of ${windowSteps} steps is shorter than the longest lag (${maxLag}) plus the horizon (${horizon})`, `make window at least ${maxLag + horizon} steps (${formatDurationMs((maxLag + horizon) * step)}), better several times that`);
    } else if (typeof s.centres === 'number' && Number.isFinite(samples)) {
      const train = Math.floor(samples * (1 - s.fit.validationFraction));
      if (s.centres > train) {
        push('CONFIG_COMBINATION', ['centres'], `${s.centres} centres but the window gives only ${train} training samples (${samples} samples minus the validation share ${s.fit.validationFraction})`, `lower centres to at most ${Math.max(1, train)} or lengthen the window`);
      }
    }
    if (everySteps > spanSteps) push('CONFIG_COMBINATION', ['backtest', 'every'], `backtest.every (${everySteps} steps) is longer than backtest.span (${spanSteps} steps): no origin fits`, 'make span at least as long as every');

    const q = [...s.quantiles].sort((a, b) => a - b);
    if (new Set(q).size !== q.length) push('CONFIG_VALUE', ['quantiles'], 'band quantiles repeat a value', 'list each quantile once, e.g. [0.1, 0.9]');

    if (s.calendar.holidays) {
      const h = s.calendar.holidays;
      const countries = holidays().getCountries('en') ?? {};
      if (!(h.country in countries)) push('CONFIG_VALUE', ['calendar', 'holidays', 'country'], `no public holiday data for country "${h.country}"`, 'use an ISO 3166-1 alpha-2 code known to date-holidays, e.g. "DE"');
      else if (h.state) {
        const states = holidays().getStates(h.country, 'en') ?? {};
        if (!(h.state in states)) push('CONFIG_VALUE', ['calendar', 'holidays', 'state'], `no state "${h.state}" in ${h.country}`, `known states: ${Object.keys(states).join(', ') || 'none'}`);
        else if (h.region) {
          const regions = holidays().getRegions(h.country, h.state, 'en') ?? {};
          if (!(h.region in regions)) push('CONFIG_VALUE', ['calendar', 'holidays', 'region'], `no region "${h.region}" in ${h.country}-${h.state}`, `known regions: ${Object.keys(regions).join(', ') || 'none'}`);
        }
      }
    }

    const d = s.drift;
    const driftSettings: DriftSettings = {
      allowance: d.detector.allowance,
      watchThreshold: d.detector.watchThreshold,
      alertThreshold: d.detector.alertThreshold,
      recoveryThreshold: d.detector.recoveryThreshold,
      batchSteps,
      spreadPrior: d.detector.spreadPrior,
      clipRatio: d.detector.clipRatio,
      raiseAfterSteps: raiseSteps,
      dwellSteps,
      novelty: { activation: d.novelty.activation, share: d.novelty.share, windowSteps: noveltyWindow },
      staleAfterMs: staleSteps * step,
      repeatAlertMs: d.webhook ? resendSteps * step : DRIFT_DEFAULTS.repeatAlertMs,
    };
    if (Object.values({ batchSteps, raiseSteps, dwellSteps, noveltyWindow, staleSteps, resendSteps }).every(Number.isFinite)) {
      // The drift layer's own check, mapped back to config keys.
      const KEY: Record<string, (string | number)[]> = {
        allowance: ['drift', 'detector', 'allowance'], watchThreshold: ['drift', 'detector', 'watchThreshold'], alertThreshold: ['drift', 'detector', 'alertThreshold'],
        recoveryThreshold: ['drift', 'detector', 'recoveryThreshold'], batchSteps: ['drift', 'detector', 'batch'], spreadPrior: ['drift', 'detector', 'spreadPrior'],
        clipRatio: ['drift', 'detector', 'clipRatio'], raiseAfterSteps: ['drift', 'detector', 'raiseAfter'], dwellSteps: ['drift', 'dwell'],
        'novelty.activation': ['drift', 'novelty', 'activation'], 'novelty.share': ['drift', 'novelty', 'share'], 'novelty.windowSteps': ['drift', 'novelty', 'window'],
        staleAfterMs: ['drift', 'staleAfter'], repeatAlertMs: ['drift', 'webhook', 'resendEvery'],
      };
      for (const p of checkDriftSettings(driftSettings)) {
        push(p.key === 'watchThreshold' ? 'CONFIG_COMBINATION' : 'CONFIG_VALUE', KEY[p.key] ?? ['drift'], `drift ${p.key} ${p.message}`, p.key === 'watchThreshold' ? 'watch must be reached before alert' : 'see drift in docs/config-reference.md');
      }
    }
    if (d.webhook) {
      const n = (d.webhook.urlEnv ? 1 : 0) + (d.webhook.urlFile ? 1 : 0);
      if (n !== 1) push('CONFIG_COMBINATION', ['drift', 'webhook'], n === 0 ? 'webhook needs urlEnv or urlFile' : 'webhook has both urlEnv and urlFile', 'give exactly one of urlEnv / urlFile');
    }

    const outName = s.output.name ?? s.name;
    if (outputNames.has(outName)) push('CONFIG_VALUE', ['output', 'name'], `output name "${outName}" is also used by series[${outputNames.get(outName)}]`, 'each series needs its own output name');
    outputNames.set(outName, i);

    const source = sourceSelector(s.name, s.source, step, at('source'), issues, s.name);
    if (issues.length > before) return;

    const settings: ForecastSettings = {
      series: s.name,
      stepMs: step,
      windowSteps,
      regularize: { aggregation: s.regularize.aggregation, duplicates: s.regularize.duplicates, maxFillSteps },
      features: {
        series: s.name,
        timeZone: s.timeZone,
        horizon,
        lags,
        seasonSteps,
        seasonalInputs: s.seasonalInputs,
        calendar: {
          hourOfDay: s.calendar.hourOfDay,
          dayOfWeek: s.calendar.dayOfWeek,
          dayOfYear: s.calendar.dayOfYear,
          holidays: s.calendar.holidays ? { ...s.calendar.holidays } : null,
          extraDates: [...s.calendar.extraDates],
        },
        exogenous: exogenous.map((e) => ({ name: e.name, lags: e.lags, atTarget: e.atTarget })),
        targetMode: s.targetMode,
        groupWeights: { ...s.groupWeights },
      },
      fit: {
        nCentres: s.centres,
        widthMode: s.widthMode,
        ridge: s.ridge,
        linearTerms: s.linearTerms,
        restarts: s.fit.restarts,
        maxPasses: s.fit.maxPasses,
        widthIterations: s.fit.widthIterations,
        widthTol: s.fit.widthTol,
        validationFraction: s.fit.validationFraction,
        seed: s.fit.seed,
        subsampleRows: s.fit.subsampleRows,
      },
      quantiles: q,
    };
    out.push({
      name: s.name,
      index: i,
      settings,
      source,
      exogenous,
      maxLagSteps: maxLag,
      samples,
      readSpanMs: windowSteps * step,
      schedule: { cron: s.refit, timeZone: s.timeZone },
      backtest: { everySteps, spanSteps, origins: Math.floor(spanSteps / everySteps) },
      drift: {
        enabled: d.enabled,
        settings: driftSettings,
        delta: driftSettings.allowance,
        watchThreshold: driftSettings.watchThreshold,
        alertThreshold: driftSettings.alertThreshold,
        dwellMs: dwellSteps * step,
        novelty: { ...driftSettings.novelty },
        staleAfterMs: driftSettings.staleAfterMs,
        webhook: d.webhook ? { resendEveryMs: driftSettings.repeatAlertMs, timeoutMs: (parseDurationMs(d.webhook.timeout) as { value: number }).value } : null,
      },
      output: { name: outName },
    });
  });

  // Store-level combinations.
  const st = config.store;
  if (st.kind === 'influxdb') {
    const ix = st.influxdb;
    if (!ix) {
      issues.push({ code: 'CONFIG_COMBINATION', segments: ['store', 'influxdb'], message: 'store.kind is influxdb but there is no store.influxdb section', hint: 'add store.influxdb with url, api and the database/bucket' });
    } else {
      const p = (k: string, message: string, hint: string) => issues.push({ code: 'CONFIG_COMBINATION', segments: ['store', 'influxdb', k], message, hint });
      if (ix.tokenEnv && ix.tokenFile) p('tokenFile', 'both tokenEnv and tokenFile are set', 'give exactly one source for the token');
      if (ix.passwordEnv && ix.passwordFile) p('passwordFile', 'both passwordEnv and passwordFile are set', 'give exactly one source for the password');
      if (ix.api === 'v2') {
        if (!ix.org) p('org', 'api v2 needs an org', 'set store.influxdb.org');
        if (!ix.bucket) p('bucket', 'api v2 needs a bucket', 'set store.influxdb.bucket');
        if (!ix.tokenEnv && !ix.tokenFile) p('tokenEnv', 'api v2 needs a token', 'set tokenEnv (variable name) or tokenFile (path)');
        if (ix.database) p('database', 'database is an api v1 option', 'use bucket with api v2, or set api: v1');
      } else {
        if (!ix.database) p('database', 'api v1 needs a database', 'set store.influxdb.database');
        if (ix.bucket || ix.org) p(ix.bucket ? 'bucket' : 'org', 'org and bucket are api v2 options', 'use database / retentionPolicy with api v1, or set api: v2');
        if ((ix.passwordEnv || ix.passwordFile) && !ix.user) p('user', 'a password is set but no user', 'set store.influxdb.user');
        if ((ix.passwordEnv || ix.passwordFile) && (ix.tokenEnv || ix.tokenFile)) p('tokenEnv', 'both a token and a password are set', 'api v1 uses one of user/password or token');
      }
    }
  }
  return { series: out, issues };
}
