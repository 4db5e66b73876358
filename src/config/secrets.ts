/**
 * Secrets (InfluxDB token / password, webhook URLs) are read once at start from environment
 * variables or files named in the config. The config object only ever holds the variable names
 * and paths; the values live inside a Secrets instance behind accessors, and the instance
 * prints as "[secrets redacted]" in logs, JSON and util.inspect, so it cannot leak by accident.
 */
import { readFileSync } from 'node:fs';
import { inspect } from 'node:util';
import type { Config } from './schema.ts';
import type { ConfigIssue } from './errors.ts';

export interface SecretDeps {
  env?: Record<string, string | undefined>;
  readFile?: (path: string) => string;
}

export class Secrets {
  readonly #values: Map<string, string>;
  constructor(values: Map<string, string> = new Map()) {
    this.#values = new Map(values);
  }
  /** InfluxDB API token (v2, or v1 token auth). */
  influxToken(): string | undefined {
    return this.#values.get('store.influxdb.token');
  }
  /** InfluxDB v1 password. */
  influxPassword(): string | undefined {
    return this.#values.get('store.influxdb.password');
  }
  /** Drift webhook URL of a series. */
  webhookUrl(series: string): string | undefined {
    return this.#values.get(`webhook:${series}`);
  }
  /** Every secret value, for scrubbing text (error messages from libraries) before it is shown. */
  values(): string[] {
    return [...this.#values.values()].filter((v) => v.length >= 4);
  }
  /** Replaces every secret value occurring in `text` with [redacted]. */
  scrub(text: string): string {
    let out = text;
    for (const v of this.values()) out = out.split(v).join('[redacted]');
    return out;
  }
  toJSON(): string {
    return '[secrets redacted]';
  }
  toString(): string {
    return '[secrets redacted]';
  }
  [inspect.custom](): string {
    return '[secrets redacted]';
  }
}

interface Ref {
  key: string;
  path: string;
  env?: string;
  file?: string;
  series?: string;
  check?: (v: string) => string | undefined;
}

function checkUrl(v: string): string | undefined {
  try {
    const u = new URL(v);
    return u.protocol === 'http:' || u.protocol === 'https:' ? undefined : 'the webhook URL must be http or https';
  } catch {
    return 'the webhook URL does not parse as a URL';
  }
}

/**
 * Reads every secret the config refers to. Messages name the variable or file, never the value.
 * Influx secrets are only read when store.kind is influxdb.
 */
export function loadSecrets(config: Config, deps: SecretDeps = {}): { secrets: Secrets; issues: ConfigIssue[] } {
  const env = deps.env ?? process.env;
  const readFile = deps.readFile ?? ((p: string) => readFileSync(p, 'utf8'));
  const refs: Ref[] = [];
  const ix = config.store.influxdb;
  if (config.store.kind === 'influxdb' && ix) {
    if (ix.tokenEnv || ix.tokenFile) refs.push({ key: 'store.influxdb.token', path: ix.tokenEnv ? 'store.influxdb.tokenEnv' : 'store.influxdb.tokenFile', env: ix.tokenEnv, file: ix.tokenFile });
    if (ix.passwordEnv || ix.passwordFile) refs.push({ key: 'store.influxdb.password', path: ix.passwordEnv ? 'store.influxdb.passwordEnv' : 'store.influxdb.passwordFile', env: ix.passwordEnv, file: ix.passwordFile });
  }
  config.series.forEach((s, i) => {
    const w = s.drift.webhook;
    if (s.drift.enabled && w && (w.urlEnv || w.urlFile)) {
      refs.push({ key: `webhook:${s.name}`, path: `series[${i}].drift.webhook.${w.urlEnv ? 'urlEnv' : 'urlFile'}`, env: w.urlEnv, file: w.urlFile, series: s.name, check: checkUrl });
    }
  });

  const values = new Map<string, string>();
  const issues: ConfigIssue[] = [];
  // Several series inheriting one webhook from `defaults` share a source: report a failing source once.
  const failed = new Map<string, { issue: ConfigIssue; users: string[] }>();
  const cache = new Map<string, string>();
  for (const r of refs) {
    const source = r.env ? `env:${r.env}` : `file:${r.file}`;
    const earlier = failed.get(source);
    if (earlier) {
      if (r.series) earlier.users.push(r.series);
      continue;
    }
    const fail = (message: string, hint: string) => {
      const issue: ConfigIssue = { code: 'SECRET_MISSING', path: r.path, series: r.series, message, hint };
      issues.push(issue);
      failed.set(source, { issue, users: r.series ? [r.series] : [] });
    };
    let v = cache.get(source);
    if (v === undefined && r.env) {
      v = env[r.env];
      if (v === undefined || v === '') {
        fail(`environment variable ${r.env} is not set or empty`, `export ${r.env}=... before starting radcast, or use the *File option`);
        continue;
      }
    } else if (v === undefined && r.file) {
      try {
        v = readFile(r.file).replace(/\r?\n$/, '');
      } catch (e) {
        fail(`cannot read secret file ${r.file} (${(e as NodeJS.ErrnoException).code ?? 'unknown'})`, 'check the path and that the radcast user may read it');
        continue;
      }
      if (v === '') {
        fail(`secret file ${r.file} is empty`, 'write the secret into the file');
        continue;
      }
    }
    if (v === undefined) continue;
    const bad = r.check?.(v);
    if (bad) {
      fail(bad, 'the value itself is not shown; check it where it is defined');
      continue;
    }
    cache.set(source, v);
    values.set(r.key, v);
  }
  for (const { issue, users } of failed.values()) {
    if (users.length > 1) {
      issue.message += ` (used by series ${users.join(', ')})`;
      delete issue.series;
    }
  }
  return { secrets: new Secrets(values), issues };
}
