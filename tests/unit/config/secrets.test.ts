import { describe, expect, it } from 'vitest';
import { Writable } from 'node:stream';
import { inspect } from 'node:util';
import { parseConfigText } from '../../../src/config/load.ts';
import { loadSecrets, Secrets } from '../../../src/config/secrets.ts';
import { createLogger } from '../../../src/config/logger.ts';

const TOKEN = 'tok-7f3a9c2e51d84b60';
const PASSWORD = 'pw-Oskaveld-hunter2';
const HOOK = 'https://hooks.example.invalid/notify?key=hook-key-99aa';

function config(text: string) {
  const r = parseConfigText(text, { baseDir: '/etc/radcast' });
  if (!r.ok) throw new Error(JSON.stringify(r.issues));
  return r.value.config;
}

const v2 = `
store: { kind: influxdb, influxdb: { api: v2, org: oskaveld, bucket: heat, tokenEnv: RADCAST_TOKEN } }
series:
  - name: oskaveld-north
    drift: { webhook: { urlFile: hook.url } }
`;

function capture() {
  const chunks: string[] = [];
  const stream = new Writable({
    write(c, _e, cb) {
      chunks.push(String(c));
      cb();
    },
  });
  return { stream, text: () => chunks.join(''), lines: () => chunks.join('').trim().split('\n').filter(Boolean).map((l) => JSON.parse(l) as Record<string, unknown>) };
}

describe('secrets', () => {
  it('are read from the environment and from files, only through accessors', () => {
    const files: Record<string, string> = { '/etc/radcast/hook.url': HOOK + '\n' };
    const { secrets, issues } = loadSecrets(config(v2), { env: { RADCAST_TOKEN: TOKEN }, readFile: (p) => files[p] ?? (() => { throw Object.assign(new Error('nope'), { code: 'ENOENT' }); })() });
    expect(issues).toEqual([]);
    expect(secrets.influxToken()).toBe(TOKEN);
    expect(secrets.webhookUrl('oskaveld-north')).toBe(HOOK);
    // The instance never shows its values.
    expect(JSON.stringify({ secrets })).not.toContain(TOKEN);
    expect(inspect(secrets, { depth: 10, showHidden: true })).not.toContain(TOKEN);
    expect(String(secrets)).not.toContain(TOKEN);
    expect(Object.keys(secrets)).toEqual([]);
  });

  it('a missing variable or file is a SECRET_MISSING issue naming the key path, never a value', () => {
    const { issues } = loadSecrets(config(v2), { env: {}, readFile: () => { throw Object.assign(new Error('x'), { code: 'EACCES' }); } });
    expect(issues.map((i) => [i.code, i.path])).toEqual([
      ['SECRET_MISSING', 'store.influxdb.tokenEnv'],
      ['SECRET_MISSING', 'series[0].drift.webhook.urlFile'],
    ]);
    expect(issues[0].message).toContain('RADCAST_TOKEN');
    expect(issues[1].message).toContain('EACCES');
  });

  it('a webhook URL that does not parse is refused without echoing it', () => {
    const { issues } = loadSecrets(config(v2), { env: { RADCAST_TOKEN: TOKEN }, readFile: () => 'not a url secret-part' });
    expect(issues).toHaveLength(1);
    expect(JSON.stringify(issues)).not.toContain('secret-part');
  });

  it('influx secrets are not read when the store is embedded', () => {
    const c = config('store: { kind: embedded, influxdb: { api: v2, org: o, bucket: b, tokenEnv: NOPE } }\nseries: [{ name: a }]');
    expect(loadSecrets(c, { env: {} }).issues).toEqual([]);
  });
});

describe('logger redaction', () => {
  it('redacts every secret field by path in JSON output', () => {
    const cap = capture();
    const log = createLogger({ destination: cap.stream });
    log.info({ token: TOKEN, store: { influxdb: { password: PASSWORD } }, req: { headers: { authorization: `Token ${TOKEN}` } }, deep: { a: { b: { webhookUrl: HOOK } } } }, 'connecting');
    log.warn({ options: { headers: { Authorization: `Bearer ${TOKEN}` } } }, 'retry');
    const out = cap.text();
    expect(out).not.toContain(TOKEN);
    expect(out).not.toContain(PASSWORD);
    expect(out).not.toContain('hook-key-99aa');
    const [first, second] = cap.lines();
    expect(first.token).toBe('[redacted]');
    expect((first.store as { influxdb: { password: string } }).influxdb.password).toBe('[redacted]');
    expect((first.req as { headers: { authorization: string } }).headers.authorization).toBe('[redacted]');
    expect(((first.deep as Record<string, Record<string, Record<string, string>>>).a.b).webhookUrl).toBe('[redacted]');
    expect(((second.options as { headers: Record<string, string> }).headers).Authorization).toBe('[redacted]');
    expect(first.msg).toBe('connecting');
  });

  it('with the loaded secrets, values inside messages, errors and unknown fields are scrubbed too', () => {
    const cap = capture();
    const secrets = new Secrets(new Map([['store.influxdb.token', TOKEN], ['webhook:a', HOOK]]));
    const log = createLogger({ destination: cap.stream, secrets });
    log.error({ err: new Error(`POST ${HOOK} failed`), detail: { url: `http://db:8086/query?p=${TOKEN}` } }, `auth with ${TOKEN} refused`);
    log.info({ secrets }, 'loaded');
    const out = cap.text();
    expect(out).not.toContain(TOKEN);
    expect(out).not.toContain(HOOK);
    const [err, loaded] = cap.lines();
    expect(err.msg).toBe('auth with [redacted] refused');
    expect((err.err as { type: string; message: string }).type).toBe('Error');
    expect((err.err as { message: string }).message).toBe('POST [redacted] failed');
    expect(loaded.secrets).toBe('[secrets redacted]');
  });

  it('pretty output (TTY mode) is redacted as well', () => {
    const cap = capture();
    const log = createLogger({ destination: cap.stream, pretty: true });
    log.info({ token: TOKEN, password: PASSWORD }, 'pretty line');
    const out = cap.text();
    expect(out).toContain('pretty line');
    expect(out).toContain('[redacted]');
    expect(out).not.toContain(TOKEN);
    expect(out).not.toContain(PASSWORD);
    expect(() => JSON.parse(out.trim().split('\n')[0])).toThrow(); // human-readable, not JSON
  });
});
