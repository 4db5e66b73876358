/**
 * `radcast check --config FILE`: validates the config (and, unless --no-secrets, that every
 * secret it names can be read) and prints each series' resolved settings. Exit 0 valid, 2 not.
 */
import type { Command } from 'commander';
import { formatDurationMs } from '../config/duration.ts';
import { loadSecrets } from '../config/secrets.ts';
import type { LoadedConfig } from '../config/load.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import { defaultContext, EXIT, loadConfigForCli, printIssues, type CliContext } from './context.ts';

/** [1,2,3,5,24,25] -> "1-3, 5, 24-25". */
export function compactLags(lags: readonly number[]): string {
  const parts: string[] = [];
  for (let i = 0; i < lags.length; ) {
    let j = i;
    while (j + 1 < lags.length && lags[j + 1] === lags[j] + 1) j++;
    parts.push(j > i ? `${lags[i]}-${lags[j]}` : String(lags[i]));
    i = j + 1;
  }
  return parts.join(', ');
}

const steps = (n: number, stepMs: number) => `${n} steps (${formatDurationMs(n * stepMs)})`;

/** Human-readable block of one series' resolved settings. */
export function describeSeries(r: ResolvedSeries): string {
  const s = r.settings;
  const f = s.features;
  const c = f.calendar;
  const fit = s.fit;
  const cal = [c.hourOfDay && 'hour of day', c.dayOfWeek && 'day of week', c.dayOfYear && 'day of year'].filter(Boolean).join(', ') || 'none';
  const hol = c.holidays ? [c.holidays.country, c.holidays.state, c.holidays.region].filter(Boolean).join('-') : 'none';
  const exo = r.exogenous.length
    ? r.exogenous.map((e) => `${e.name} [lags ${compactLags(e.lags)}${e.atTarget ? ', at target' : ''}${e.configured ? '' : ', input only'}]`).join('; ')
    : 'none';
  const src = r.source;
  const tags = Object.entries(src.tags ?? {}).map(([k, v]) => `${k}=${v}`).join(',');
  const d = r.drift;
  const lines = [
    `series ${r.name}`,
    `  source       measurement ${src.measurement} field ${src.field}${tags ? ` tags ${tags}` : ''}${src.aggregateMs ? ` mean per ${formatDurationMs(src.aggregateMs)}` : ''}`,
    `  step         ${formatDurationMs(s.stepMs)}, time zone ${f.timeZone}`,
    `  horizon      ${steps(f.horizon, s.stepMs)}`,
    `  window       ${steps(s.windowSteps, s.stepMs)} -> ${r.samples} training samples (longest lag ${r.maxLagSteps})`,
    `  lags         ${compactLags(f.lags)}`,
    `  season       ${steps(f.seasonSteps, s.stepMs)}, seasonal inputs ${f.seasonalInputs ? 'on' : 'off'}, target ${f.targetMode}`,
    `  calendar     ${cal}; holidays ${hol}; extra dates ${c.extraDates.length}`,
    `  exogenous    ${exo}`,
    `  model        centres ${fit.nCentres}, width ${fit.widthMode}, ridge ${fit.ridge}, linear terms ${fit.linearTerms ? 'on' : 'off'}, restarts ${fit.restarts}, seed ${fit.seed}`,
    `  weights      lags ${f.groupWeights.lags}, calendar ${f.groupWeights.calendar}, exogenous ${f.groupWeights.exogenous}`,
    `  regularize   ${s.regularize.aggregation} per step, duplicates ${s.regularize.duplicates}, fill gaps up to ${s.regularize.maxFillSteps} steps`,
    `  refit        "${r.schedule.cron}" (${r.schedule.timeZone})`,
    `  backtest     ${r.backtest.origins} origins, every ${steps(r.backtest.everySteps, s.stepMs)} over ${steps(r.backtest.spanSteps, s.stepMs)}`,
    `  bands        quantiles ${s.quantiles.join(', ')}`,
    d.enabled
      ? `  drift        CUSUM (allowance ${d.settings.allowance}, watch ${d.settings.watchThreshold}, alert ${d.settings.alertThreshold}, recovery ${d.settings.recoveryThreshold}; batch ${d.settings.batchSteps} steps), dwell ${d.settings.dwellSteps} steps, novelty below ${d.settings.novelty.activation} on ${Math.round(d.settings.novelty.share * 100)}% of ${d.settings.novelty.windowSteps} steps, stale after ${formatDurationMs(d.settings.staleAfterMs)}, webhook ${d.webhook ? `on (again every ${formatDurationMs(d.webhook.resendEveryMs) || 'never'} in alert)` : 'off'}`
      : '  drift        off',
    `  output       ${r.output.name}`,
  ];
  return lines.join('\n');
}

export function describeConfig(loaded: LoadedConfig): string {
  const c = loaded.config;
  const store = c.store.kind === 'embedded' ? `embedded ${c.store.embedded.path}` : `influxdb ${c.store.influxdb?.api} ${c.store.influxdb?.url}`;
  return [
    `config ${loaded.file ?? '(text)'}: valid, ${loaded.series.length} series`,
    `  store ${store}`,
    `  state ${c.state.path}`,
    `  http  ${c.http.enabled ? `${c.http.address}:${c.http.port}` : 'off'}`,
    `  log   ${c.log.level}; concurrency ${c.daemon.concurrency}`,
  ].join('\n');
}

export function registerCheck(program: Command, ctx: CliContext = defaultContext()): void {
  program
    .command('check')
    .description("validate a config file and print each series' resolved settings")
    .requiredOption('-c, --config <file>', 'config file (YAML)')
    .option('--no-secrets', 'do not check that the secrets named in the config can be read')
    .option('--json', 'print the resolved settings as JSON')
    .action((opts: { config: string; secrets: boolean; json?: boolean }) => {
      const loaded = loadConfigForCli(ctx, opts.config);
      if (!loaded) return;
      if (opts.secrets) {
        const { issues } = loadSecrets(loaded.config, { env: ctx.env });
        if (issues.length) {
          printIssues(ctx, opts.config, issues);
          ctx.fail(EXIT.INVALID);
          return;
        }
      }
      if (opts.json) {
        ctx.io.out(JSON.stringify({ file: loaded.file, store: loaded.config.store.kind, series: loaded.series }, null, 2) + '\n');
        return;
      }
      ctx.io.out(describeConfig(loaded) + '\n\n' + loaded.series.map(describeSeries).join('\n\n') + '\n');
    });
}
