/**
 * The config schema: the ONLY definition of every option, its default, its unit and its doc
 * line. Types come from it (z.infer); the README reference is generated from it
 * (scripts/gen-config-doc.ts). Duration-valued options stay strings here and are converted to
 * steps / milliseconds when a series is resolved (src/config/resolve.ts), where the step is known.
 *
 * Metadata on each option: `description` (the doc line) and, where it has one, `unit`.
 */
import { z } from 'zod';
import cron from 'node-cron';
import { DURATION_PATTERN, formatDurationMs } from './duration.ts';
import { DRIFT_DEFAULTS } from '../drift/settings.ts';

// ---------- small value types ----------

const duration = (description: string) =>
  z.string().regex(DURATION_PATTERN, { message: 'expected a duration like "15m", "1h", "1d", "8w"' }).meta({ description, unit: 'duration' });

/** Whole steps (integer) or a duration that is a multiple of the step. */
const stepsOrDuration = (description: string) =>
  z
    .union([
      z.number().int().nonnegative(),
      z.string().regex(DURATION_PATTERN, { message: 'expected a step count or a duration like "1d"' }),
    ])
    .meta({ description, unit: 'steps | duration' });

const lagList = (description: string) =>
  z
    .array(
      z.union([
        z.number().int().positive(),
        z.string().regex(/^[\s\d,\-mshdw]+$/, { message: 'expected lags like 24, "1-24" or "1w"' }),
      ]),
    )
    .min(1)
    .meta({ description, unit: 'steps' });

const envName = (description: string) =>
  z.string().regex(/^[A-Za-z_][A-Za-z0-9_]*$/, { message: 'expected an environment variable name' }).meta({ description });

const cronExpr = z
  .string()
  .refine((s) => cron.validate(s), { message: 'not a valid cron expression (node-cron syntax: 5 or 6 fields)' });

function isTimeZone(tz: string): boolean {
  try {
    new Intl.DateTimeFormat('en-US', { timeZone: tz });
    return true;
  } catch {
    return false;
  }
}

// ---------- store ----------

export const InfluxMeasurementsSchema = z
  .strictObject({
    forecast: z.string().min(1).default('radcast_forecast').meta({ description: 'Measurement of the forecast history (one point per series, lead and target time).' }),
    latest: z.string().min(1).default('radcast_forecast_latest').meta({ description: 'Measurement holding only the latest forecast per series.' }),
    score: z.string().min(1).default('radcast_score').meta({ description: 'Measurement of accuracy scores.' }),
    health: z.string().min(1).default('radcast_health').meta({ description: 'Measurement of drift state and health.' }),
  })
  .meta({ description: 'Names of the measurements radcast writes.' });

export const InfluxSchema = z
  .strictObject({
    url: z.url().default('http://127.0.0.1:8086').meta({ description: 'Base URL of the InfluxDB server.' }),
    api: z.enum(['v1', 'v2']).default('v2').meta({ description: 'v2: org/bucket/token, Flux reads; v1: database/retention policy, InfluxQL reads.' }),
    org: z.string().min(1).optional().meta({ description: 'Organisation (api v2).' }),
    bucket: z.string().min(1).optional().meta({ description: 'Bucket (api v2).' }),
    database: z.string().min(1).optional().meta({ description: 'Database (api v1).' }),
    retentionPolicy: z.string().min(1).optional().meta({ description: 'Retention policy (api v1); server default when absent.' }),
    user: z.string().min(1).optional().meta({ description: 'User name (api v1 with password).' }),
    tokenEnv: envName('Environment variable holding the API token.').optional(),
    tokenFile: z.string().min(1).optional().meta({ description: 'File holding the API token (trailing newline ignored); relative to the config file.' }),
    passwordEnv: envName('Environment variable holding the password (api v1).').optional(),
    passwordFile: z.string().min(1).optional().meta({ description: 'File holding the password (api v1); relative to the config file.' }),
    timeout: duration('Timeout of one HTTP request to the server.').default('10s'),
    writeBufferPoints: z.number().int().positive().default(100_000).meta({ description: 'Bound of points waiting in memory to be sent; beyond it (and as soon as a send fails) they move to the spool in the state file.', unit: 'points' }),
    spoolMaxPoints: z.number().int().positive().default(2_000_000).meta({ description: 'Bound of unconfirmed points kept in the spool (a table in the state file) through an outage, a shutdown or a crash; beyond it the oldest forecasts are dropped (counted and logged).', unit: 'points' }),
    batchSize: z.number().int().positive().default(5_000).meta({ description: 'Points per write request.', unit: 'points' }),
    flushInterval: duration('Longest time a point waits in the write buffer.').default('1s'),
    maxRetryDelay: duration('Cap of the exponential backoff between write retries.').default('30s'),
    measurements: InfluxMeasurementsSchema.prefault({}),
  })
  .meta({ description: 'InfluxDB connection (used when store.kind is influxdb). Secrets only by env variable name or file path.' });

export const StoreSchema = z
  .strictObject({
    kind: z.enum(['embedded', 'influxdb']).default('embedded').meta({ description: 'Where readings are read and forecasts written: embedded SQLite file or InfluxDB.' }),
    embedded: z
      .strictObject({
        path: z.string().min(1).default('radcast.db').meta({ description: 'SQLite file of the embedded store; relative to the config file.', unit: 'path' }),
      })
      .prefault({})
      .meta({ description: 'Embedded store (store.kind embedded).' }),
    influxdb: InfluxSchema.optional(),
  })
  .meta({ description: 'The time-series store.' });

// ---------- per-series options (defaults + each series) ----------

export const SourceSchema = z
  .strictObject({
    measurement: z.string().min(1).optional().meta({ description: 'Measurement to read (InfluxDB); defaults to the series name.' }),
    field: z.string().min(1).default('value').meta({ description: 'Field to read (InfluxDB).' }),
    tags: z.record(z.string().min(1), z.string()).default({}).meta({ description: 'Tag equality filters (InfluxDB).' }),
    aggregate: z
      .union([z.literal('none'), z.literal('step'), z.string().regex(DURATION_PATTERN)])
      .default('none')
      .meta({ description: 'Mean per window pushed down to the server: "none" (raw), "step" (the series step) or a duration.' }),
  })
  .meta({ description: 'Where the readings come from. The embedded store only uses the series name.' });

export const CalendarSchema = z
  .strictObject({
    hourOfDay: z.boolean().default(true).meta({ description: 'Hour-of-day inputs (local time, DST-safe).' }),
    dayOfWeek: z.boolean().default(true).meta({ description: 'Day-of-week inputs.' }),
    dayOfYear: z.boolean().default(false).meta({ description: 'Day-of-year inputs (needs more than a year of window to help).' }),
    holidays: z
      .strictObject({
        country: z.string().regex(/^[A-Z]{2}$/, { message: 'expected a two-letter country code like "DE"' }).meta({ description: 'Country code for public holidays (date-holidays).' }),
        state: z.string().min(1).optional().meta({ description: 'State or province code, e.g. "BY".' }),
        region: z.string().min(1).optional().meta({ description: 'Region code within the state.' }),
      })
      .nullable()
      .default(null)
      .meta({ description: 'Public holidays flagged as an input; null = none.' }),
    extraDates: z
      .array(z.iso.date({ message: 'expected a date YYYY-MM-DD' }))
      .default([])
      .meta({ description: 'Extra local dates flagged like holidays (shutdowns, local events).', unit: 'YYYY-MM-DD' }),
  })
  .meta({ description: 'Calendar inputs in the series time zone.' });

export const ExogenousSchema = z
  .strictObject({
    name: z.string().min(1).meta({ description: 'Name of the input series (a configured series or one read only as input).' }),
    lags: lagList('Lags of the input used, as for the series itself.').default(['1-24']),
    atTarget: z.boolean().default(false).meta({ description: 'Also use the input at each target time; needs a forecast of it, so it must be a configured series.' }),
    source: SourceSchema.optional().meta({ description: 'Selector for an input that is not a configured series.' }),
  })
  .meta({ description: 'An exogenous input series.' });

export const FitSchema = z
  .strictObject({
    restarts: z.number().int().positive().max(100).default(3).meta({ description: 'k-means++ restarts; the lowest inertia wins.' }),
    maxPasses: z.number().int().positive().max(10_000).default(100).meta({ description: "Upper bound on Lloyd's passes per restart." }),
    widthIterations: z.number().int().nonnegative().max(1_000).default(5).meta({ description: 'Alternating weight/width update rounds.' }),
    widthTol: z.number().nonnegative().default(1e-3).meta({ description: 'Stop the width updates when the relative validation gain is below this.', unit: 'ratio' }),
    validationFraction: z.number().min(0).max(0.9).default(0.2).meta({ description: 'Share of the training samples (the newest) held back for width and auto choices.', unit: 'ratio' }),
    seed: z.number().int().nonnegative().default(1).meta({ description: 'Seed of the random source (k-means++ seeding, subsampling).' }),
    subsampleRows: z.number().int().nonnegative().default(0).meta({ description: 'Run k-means on a seeded subsample of this many samples (0 = all).', unit: 'samples' }),
  })
  .meta({ description: 'Fitting details of the network.' });

export const GroupWeightsSchema = z
  .strictObject({
    lags: z.number().positive().default(1).meta({ description: 'Distance weight of the lag inputs.' }),
    calendar: z.number().positive().default(1).meta({ description: 'Distance weight of the calendar inputs.' }),
    exogenous: z.number().positive().default(1).meta({ description: 'Distance weight of the exogenous inputs.' }),
  })
  .meta({ description: 'Relative weights of the input groups in the distances the Gaussian units see.' });

export const RegularizeSchema = z
  .strictObject({
    aggregation: z.enum(['mean', 'sum', 'last', 'max', 'min']).default('mean').meta({ description: 'How readings within one step are combined.' }),
    duplicates: z.enum(['last', 'mean']).default('last').meta({ description: 'What to do with readings that share a timestamp.' }),
    maxFill: stepsOrDuration('Gaps up to this length are filled by linear interpolation; longer ones stay missing.').default(3),
  })
  .meta({ description: 'Turning raw readings into a fixed-step series.' });

export const BacktestSchema = z
  .strictObject({
    every: stepsOrDuration('Spacing of the rolling forecast origins.').default('1d'),
    span: stepsOrDuration('How far back from the newest reading the origins reach.').default('4w'),
  })
  .meta({ description: 'Rolling-origin backtest run before the first forecast and by `radcast backtest`.' });

/** Grid of `radcast tune`; a grid given on the command line replaces that dimension. */
export const TuneSchema = z
  .strictObject({
    windows: z
      .array(z.union([z.number().int().positive(), z.string().regex(DURATION_PATTERN, { message: 'expected a step count or a duration like "8w"' })]))
      .min(1)
      .default(['4w', '8w', '16w'])
      .meta({ description: 'Training windows tried (step counts or durations).', unit: 'steps | duration' }),
    centres: z.array(z.number().int().positive().max(4096)).min(1).default([8, 16, 32, 64]).meta({ description: 'Numbers of Gaussian units K tried.', unit: 'count' }),
    widthModes: z.array(z.enum(['shared', 'per-centre'])).min(1).default(['shared', 'per-centre']).meta({ description: 'Width modes tried.' }),
    ridges: z.array(z.number().nonnegative()).default([]).meta({ description: "Relative ridge penalties tried; empty = keep the series' ridge.", unit: 'ratio' }),
    lagSets: z.array(lagList('One lag list tried.')).default([]).meta({ description: "Lag lists tried; empty = keep the series' lags.", unit: 'steps' }),
  })
  .meta({ description: 'Settings grid searched by `radcast tune`: every combination is backtested like `radcast backtest`. Not used by the daemon.' });

export const WebhookSchema = z
  .strictObject({
    urlEnv: envName('Environment variable holding the webhook URL (URLs often carry a token).').optional(),
    urlFile: z.string().min(1).optional().meta({ description: 'File holding the webhook URL; relative to the config file.' }),
    resendEvery: stepsOrDuration('While in alert, send the alert again at this interval (0 = only on transitions).').default(formatDurationMs(DRIFT_DEFAULTS.repeatAlertMs)),
    timeout: duration('Timeout of one webhook request.').default('10s'),
  })
  .meta({ description: 'Webhook notified on drift state transitions (POST JSON), kept in the state store until delivered.' });

const D = DRIFT_DEFAULTS;
export const DriftSchema = z
  .strictObject({
    enabled: z.boolean().default(true).meta({ description: 'Run drift detection for the series.' }),
    detector: z
      .strictObject({
        allowance: z.number().nonnegative().default(D.allowance).meta({ description: 'CUSUM reference allowance k: excess error below it is not accumulated; most sensitive to a rise of about 2k.', unit: 'spread units' }),
        watchThreshold: z.number().positive().default(D.watchThreshold).meta({ description: 'Statistic at or above which the state rises to watch.', unit: 'spread units' }),
        alertThreshold: z.number().positive().default(D.alertThreshold).meta({ description: 'Statistic at or above which the state rises to alert (the CUSUM decision interval h).', unit: 'spread units' }),
        recoveryThreshold: z.number().positive().default(D.recoveryThreshold).meta({ description: 'Evidence of the recovery CUSUM needed to return from watch/alert to ok.', unit: 'spread units' }),
        batch: stepsOrDuration('Matured target steps per batch: the time scale of the statistic and of its spread estimate.').default('1d'),
        spreadPrior: z.number().positive().default(D.spreadPrior).meta({ description: 'Assumed spread (standard deviation of a batch mean of the error ratio) until enough in-control batches were seen.', unit: 'ratio' }),
        clipRatio: z.number().gt(1).default(D.clipRatio).meta({ description: 'One matured step counts as at most this many times the baseline error (spike clip).', unit: 'ratio' }),
        raiseAfter: stepsOrDuration('Matured steps the statistic must stay at or above a threshold before the state rises.').default(D.raiseAfterSteps),
      })
      .prefault({})
      .meta({ description: 'Change detector (CUSUM on forecast errors scaled by the backtest error level), in units of the batch-mean spread.' }),
    dwell: stepsOrDuration('Minimum time in watch/alert before the state may return to ok (against flapping).').default('1d'),
    novelty: z
      .strictObject({
        activation: z.number().gt(0).lt(1).default(D.novelty.activation).meta({ description: 'An input is novel when its largest Gaussian activation is below this.', unit: 'activation' }),
        share: z.number().gt(0).max(1).default(D.novelty.share).meta({ description: 'Share of novel recent inputs that raises watch (cleared below half of it).', unit: 'ratio' }),
        window: stepsOrDuration('How far back the novelty share is taken.').default('1d'),
      })
      .prefault({})
      .meta({ description: 'Input novelty: inputs far from every centre.' }),
    staleAfter: stepsOrDuration('No new readings for this long gives the state stale.').default(formatDurationMs(D.staleAfterMs)),
    webhook: WebhookSchema.optional(),
  })
  .meta({ description: 'Forecast-error drift detection (src/drift).' });

export const OutputSchema = z
  .strictObject({
    name: z.string().min(1).optional().meta({ description: 'Series key the forecasts, scores and health are written under; defaults to the series name.' }),
  })
  .meta({ description: 'Names of what radcast writes for the series.' });

/** Options every series has; `defaults` sets them for all, each series entry may override any. */
export const seriesOptionsShape = {
  source: SourceSchema.prefault({}),
  step: duration('Fixed step of the series (readings are bucketed to it).').default('1h'),
  timeZone: z
    .string()
    .refine(isTimeZone, { message: 'unknown IANA time zone (e.g. "Europe/Berlin")' })
    .default('UTC')
    .meta({ description: 'IANA time zone for calendar inputs and the refit schedule.' }),
  horizon: stepsOrDuration('Forecast horizon H: how far ahead each forecast reaches.').default('1d'),
  window: stepsOrDuration('Training window: the span of recent data the model is refitted on.').default('8w'),
  season: stepsOrDuration('Season length (the daily cycle for most loads); used by seasonal inputs, seasonal target mode and seasonal-naive scaling.').default('1d'),
  centres: z.union([z.number().int().positive().max(4096), z.literal('auto')]).default(32).meta({ description: 'Number of Gaussian units K, or auto (chosen on the validation tail).', unit: 'count' }),
  lags: lagList('Lags of the series itself used as inputs: integers, ranges "a-b", or durations.').default(['1-24', 168]),
  seasonalInputs: z.boolean().default(true).meta({ description: 'Add the value one season before each target step as an input.' }),
  calendar: CalendarSchema.prefault({}),
  exogenous: z.array(ExogenousSchema).default([]).meta({ description: 'Other series used as inputs (e.g. outdoor temperature).' }),
  widthMode: z.enum(['shared', 'per-centre', 'auto']).default('shared').meta({ description: 'One Gaussian width for all units, one per unit, or auto.' }),
  ridge: z.union([z.number().nonnegative(), z.literal('auto')]).default(1e-3).meta({ description: 'Ridge penalty relative to the mean diagonal of the design Gram matrix, or auto.', unit: 'ratio' }),
  linearTerms: z.boolean().default(true).meta({ description: 'Add linear terms of the inputs beside the Gaussian units.' }),
  targetMode: z.enum(['absolute', 'level', 'seasonal']).default('level').meta({ description: 'Target as the raw value, minus the last observed value, or minus the value one season earlier.' }),
  groupWeights: GroupWeightsSchema.prefault({}),
  fit: FitSchema.prefault({}),
  regularize: RegularizeSchema.prefault({}),
  refit: cronExpr.default('5 * * * *').meta({ description: 'Cron expression (node-cron, 5 or 6 fields) for refit-and-forecast, in the series time zone.' }),
  backtest: BacktestSchema.prefault({}),
  tune: TuneSchema.prefault({}),
  quantiles: z
    .array(z.number().gt(0).lt(1))
    .default([0.1, 0.9])
    .meta({ description: 'Band quantiles in (0, 1), from backtest residuals per lead time.', unit: 'probability' }),
  drift: DriftSchema.prefault({}),
  output: OutputSchema.prefault({}),
} as const;

export const SeriesOptionsSchema = z.strictObject(seriesOptionsShape).meta({ description: 'Defaults for every series; each series entry may override any of them.' });

export const SeriesEntrySchema = z
  .strictObject({
    name: z
      .string()
      .min(1)
      .max(200)
      .regex(/^[^\s\u0000-\u001f]+$/, { message: 'series names may not contain spaces or control characters' })
      .meta({ description: 'Series name: the key of its readings and of everything radcast writes for it.' }),
    ...seriesOptionsShape,
  })
  .meta({ description: 'One forecast series.' });

export const HttpSchema = z
  .strictObject({
    enabled: z.boolean().default(true).meta({ description: 'Serve /healthz, /readyz, /metrics and the read-only page.' }),
    address: z.string().min(1).default('127.0.0.1').meta({ description: 'Address to bind; loopback by default, set 0.0.0.0 deliberately.' }),
    port: z.number().int().min(0).max(65_535).default(8787).meta({ description: 'TCP port (0 = any free port).' }),
  })
  .meta({ description: 'HTTP endpoints.' });

export const DaemonSchema = z
  .strictObject({
    concurrency: z.number().int().positive().max(256).default(2).meta({ description: 'Series fitted at the same time (worker threads).', unit: 'count' }),
    shutdownTimeout: duration('On SIGTERM, how long running fits may finish before the process exits.').default('30s'),
    watchConfig: z.boolean().default(true).meta({ description: 'Reload the config when the file changes (SIGHUP always reloads).' }),
  })
  .meta({ description: 'The long-running process.' });

export const ConfigSchema = z
  .strictObject({
    store: StoreSchema.prefault({}),
    state: z
      .strictObject({
        path: z.string().min(1).default('radcast-state.db').meta({ description: "SQLite file of radcast's own state (models, ledger, residuals, drift state, outbox); relative to the config file.", unit: 'path' }),
      })
      .prefault({})
      .meta({ description: 'Local state, always SQLite.' }),
    http: HttpSchema.prefault({}),
    log: z
      .strictObject({
        level: z.enum(['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent']).default('info').meta({ description: 'Log level.' }),
      })
      .prefault({})
      .meta({ description: 'Logging (JSON lines; pretty on a terminal).' }),
    daemon: DaemonSchema.prefault({}),
    defaults: SeriesOptionsSchema.prefault({}),
    series: z.array(SeriesEntrySchema).min(1, { message: 'at least one series is needed' }).meta({ description: 'The series to forecast.' }),
  })
  .meta({ description: 'radcast configuration file (YAML).' });

export type Config = z.infer<typeof ConfigSchema>;
export type ConfigInput = z.input<typeof ConfigSchema>;
export type SeriesEntry = z.infer<typeof SeriesEntrySchema>;
export type SeriesOptions = z.infer<typeof SeriesOptionsSchema>;
export type InfluxConfig = z.infer<typeof InfluxSchema>;
export type StoreConfig = z.infer<typeof StoreSchema>;
export type DriftConfig = z.infer<typeof DriftSchema>;
export type SourceConfig = z.infer<typeof SourceSchema>;
