/** Config problems as values: a code, the key path, the series (when known), a message and a hint. */

export type ConfigIssueCode =
  | 'CONFIG_READ'
  | 'CONFIG_YAML'
  | 'CONFIG_UNKNOWN_KEY'
  | 'CONFIG_TYPE'
  | 'CONFIG_VALUE'
  | 'CONFIG_COMBINATION'
  | 'SECRET_MISSING';

export interface ConfigIssue {
  code: ConfigIssueCode;
  /** Key path in the file, e.g. "series[1].window" ("" = the whole file). */
  path: string;
  /** Series name when the issue belongs to one series. */
  series?: string;
  message: string;
  hint: string;
  /** 1-based line in the file, when known (YAML syntax errors). */
  line?: number;
}

/** Formats one issue as a single log/terminal line. */
export function formatIssue(i: ConfigIssue): string {
  const where = [i.path || '(file)', i.series ? `series=${i.series}` : '', i.line ? `line=${i.line}` : ''].filter(Boolean).join(' ');
  return `${i.code} ${where}: ${i.message}${i.hint ? ` (hint: ${i.hint})` : ''}`;
}

/** Thrown only by the convenience wrappers; carries every issue found. */
export class ConfigError extends Error {
  readonly code = 'CONFIG_INVALID';
  readonly issues: ConfigIssue[];
  constructor(issues: ConfigIssue[]) {
    super(`config invalid: ${issues.length} issue(s)\n` + issues.map((i) => '  ' + formatIssue(i)).join('\n'));
    this.name = 'ConfigError';
    this.issues = issues;
  }
}

/** Path segments -> "store.influxdb.url", "series[2].lags[0]". */
export function formatPath(segments: readonly PropertyKey[]): string {
  let out = '';
  for (const s of segments) {
    if (typeof s === 'number') out += `[${s}]`;
    else out += (out === '' ? '' : '.') + String(s);
  }
  return out;
}
