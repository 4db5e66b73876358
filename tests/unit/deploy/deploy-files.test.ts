/**
 * Validates the deployment files in deploy/ with the validators the registries provide:
 *  - systemd-analyze verify and systemd-analyze security (Debian's systemd) on the unit;
 *  - dockerfile-utils (the Dockerfile linter behind a common editor language server) on the
 *    Containerfile, plus structural checks with dockerfile-ast;
 *  - the Kubernetes OpenAPI schemas as compiled validators (kubernetes-models) and, for unknown
 *    fields, the same API's TypeScript types through the TypeScript compiler (excess property
 *    checks, the way `kubectl --validate=strict` rejects unknown fields);
 *  - radcast's own config schema on the ConfigMap, and radcast's shard resolver on the pod names.
 * Not run here: building the image (no container engine) and applying the manifests (no cluster).
 */
import { describe, expect, it, beforeAll, afterAll } from 'vitest';
import { spawnSync, spawn } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, readdirSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { createServer, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { parse as parseYaml, parseAllDocuments } from 'yaml';
import ts from 'typescript';
import { validate as lintDockerfile } from 'dockerfile-utils';
import { DockerfileParser } from 'dockerfile-ast';
import { StatefulSet } from 'kubernetes-models/apps/v1';
import { ConfigMap, Secret, Service } from 'kubernetes-models/v1';
import { ConfigSchema } from '../../../src/config/schema.ts';
import { resolveShard } from '../../../src/daemon/shard.ts';
import { HttpServer } from '../../../src/daemon/http.ts';
import { DaemonMetrics } from '../../../src/daemon/metrics.ts';
import pino from 'pino';

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../../..');
const deploy = path.join(root, 'deploy');
const read = (p: string) => readFileSync(path.join(root, p), 'utf8');

function run(cmd: string, args: string[]) {
  const r = spawnSync(cmd, args, { encoding: 'utf8', timeout: 30_000 });
  if (r.error) throw new Error(`${cmd} could not run (${r.error.message}); install it with scripts/install-test-deps.sh`);
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}

// ---------------------------------------------------------------- systemd

describe('deploy/radcast.service', () => {
  const unit = path.join(deploy, 'radcast.service');
  const text = readFileSync(unit, 'utf8');
  const directives = (key: string) =>
    text
      .split('\n')
      .filter((l) => l.startsWith(`${key}=`))
      .map((l) => l.slice(key.length + 1));

  it('passes systemd-analyze verify without a single complaint', () => {
    const r = run('systemd-analyze', ['verify', unit]);
    expect(r.stderr.trim()).toBe('');
    expect(r.code).toBe(0);
  });

  it('systemd-analyze verify does complain about a broken copy (the check can fail)', () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-unit-'));
    try {
      const bad = path.join(dir, 'radcast.service');
      writeFileSync(bad, text.replace('Restart=on-failure', 'Restart=sometimes').replace('ProtectHome=yes', 'ProtectHom=yes'));
      const r = run('systemd-analyze', ['verify', bad]);
      expect(r.stderr).toMatch(/restart specifier/);
      expect(r.stderr).toMatch(/Unknown key 'ProtectHom'/);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });

  it('has an exposure level of at most 2.0 in systemd-analyze security (scale 0 safe .. 10 unsafe)', () => {
    const r = run('systemd-analyze', ['security', '--offline=yes', '--threshold=20', unit]);
    const m = /Overall exposure level for radcast\.service: ([\d.]+)/.exec(r.stdout);
    expect(m, r.stdout + r.stderr).not.toBeNull();
    expect(Number(m![1])).toBeLessThanOrEqual(2.0);
    expect(r.code).toBe(0);
  });

  it('runs radcast unprivileged, restarts on failure and reloads on SIGHUP', () => {
    expect(directives('User')).toEqual(['radcast']);
    expect(directives('Group')).toEqual(['radcast']);
    expect(directives('Restart')).toEqual(['on-failure']);
    expect(directives('NoNewPrivileges')).toEqual(['yes']);
    expect(directives('CapabilityBoundingSet')).toEqual(['']);
    expect(directives('ExecReload')).toEqual(['/bin/kill -HUP $MAINPID']);
    const exec = directives('ExecStart');
    expect(exec).toHaveLength(1);
    expect(exec[0]).toMatch(/\/bin\/radcast\.mjs run --config \/etc\/radcast\/radcast\.yaml$/);
  });

  it('passes the token as a credential file and keeps state in the state directory', () => {
    expect(directives('LoadCredential')).toEqual(['store-token:/etc/radcast/store-token']);
    expect(directives('StateDirectory')).toEqual(['radcast']);
    // The comment tells the config where the credential appears; keep it true.
    expect(text).toContain('tokenFile: /run/credentials/radcast.service/store-token');
  });

  it('ships a sysusers entry that creates the radcast user without a login shell', () => {
    const line = read('deploy/radcast.sysusers')
      .split('\n')
      .find((l) => l.startsWith('u '));
    expect(line).toBeDefined();
    const [type, name, id, , home, shell] = line!.match(/"[^"]*"|\S+/g)!;
    expect([type, name, id, home, shell]).toEqual(['u', 'radcast', '-', '/var/lib/radcast', '/usr/sbin/nologin']);
  });
});

// ---------------------------------------------------------------- container

describe('deploy/Containerfile', () => {
  const text = read('deploy/Containerfile');
  const df = DockerfileParser.parse(text);
  const instr = df.getInstructions();
  const args = (i: (typeof instr)[number]) => i.getArguments().map((a) => a.getValue());

  it('has no findings from the dockerfile-utils linter', () => {
    expect(lintDockerfile(text)).toEqual([]);
  });

  it('the linter reports a broken copy (the check can fail)', () => {
    const broken = text.replace('HEALTHCHECK --interval=30s', 'HEALTHCHECK --interval=thirty').replace(/^USER .*$/m, 'USER');
    const findings = lintDockerfile(broken).map((d) => (typeof d.message === 'string' ? d.message : d.message.value));
    expect(findings.some((m) => /invalid duration/.test(m))).toBe(true);
    expect(findings.some((m) => /no arguments/.test(m))).toBe(true);
  });

  it('builds on node:20-slim and installs production dependencies only with npm ci', () => {
    expect(df.getFROMs().map((f) => f.getImage())).toEqual(['node:20-slim', 'node:20-slim']);
    expect(instr.some((i) => i.getKeyword() === 'RUN' && /\bnpm ci --omit=dev\b/.test(i.getArgumentsContent() ?? ''))).toBe(true);
  });

  it('runs as a numeric non-root user in the final stage', () => {
    const users = instr.filter((i) => i.getKeyword() === 'USER');
    expect(users).toHaveLength(1);
    const [uid, gid] = args(users[0])[0].split(':').map(Number);
    expect(uid).toBeGreaterThan(0);
    expect(gid).toBeGreaterThan(0);
    // The k8s pod runs with the same ids (runAsUser / runAsGroup).
    expect(uid).toBe(CONTAINER_UID);
    const lastFrom = instr.lastIndexOf(instr.filter((i) => i.getKeyword() === 'FROM').at(-1)!);
    expect(instr.indexOf(users[0])).toBeGreaterThan(lastFrom);
  });

  it('checks health with the shipped health-check script and starts radcast run', () => {
    const hc = instr.find((i) => i.getKeyword() === 'HEALTHCHECK');
    expect(hc?.getArgumentsContent()).toMatch(/CMD \["node", "\/opt\/radcast\/deploy\/healthcheck\.mjs"\]/);
    const entry = instr.find((i) => i.getKeyword() === 'ENTRYPOINT')!;
    const cmd = instr.find((i) => i.getKeyword() === 'CMD')!;
    expect(JSON.parse(entry.getArgumentsContent()!)).toEqual(['node', '/opt/radcast/bin/radcast.mjs']);
    expect(JSON.parse(cmd.getArgumentsContent()!)).toEqual(['run', '--config', '/etc/radcast/radcast.yaml']);
  });

  it('copies only paths that exist and that the ignore file lets into the build context', () => {
    const ignore = read('deploy/Containerfile.dockerignore')
      .split('\n')
      .filter((l) => l.startsWith('!'))
      .map((l) => l.slice(1).replace(/\/$/, ''));
    const sources = instr
      .filter((i) => i.getKeyword() === 'COPY')
      .flatMap((i) => args(i).slice(0, -1))
      // COPY --from=deps /opt/... copies from the build stage, not the context.
      .filter((s) => !s.startsWith('/'));
    expect(sources.length).toBeGreaterThan(3);
    for (const s of sources) {
      expect(existsSync(path.join(root, s)), `${s} exists`).toBe(true);
      expect(ignore, `${s} is let through by Containerfile.dockerignore`).toContain(s);
    }
  });

  it('the import scan finds value imports and skips type-only ones (the check can fail)', () => {
    const src = "import { a } from 'vitest';\nimport type { B } from 'fast-check';\nimport x from './local.ts';\nconst m = await import('ml-kmeans');\nimport fs from 'node:fs';\nexport { c } from '@scope/pkg/sub';\nimport {\n  d,\n} from 'ajv';\n";
    expect(bareImports(src)).toEqual(['vitest', 'ml-kmeans', '@scope/pkg', 'ajv']);
  });

  it('needs nothing from devDependencies at run time (the image has none)', () => {
    const pkg = JSON.parse(read('package.json'));
    const prod = new Set(Object.keys(pkg.dependencies ?? {}));
    expect(prod.has('tsx')).toBe(true);
    // What the image runs: the CLI launcher and the worker-thread entry files, and everything they
    // import (build scripts such as src/model/wasm/build.ts are not reached and may use dev tools).
    const entries = [path.join(root, 'bin/radcast.mjs'), ...listFiles(path.join(root, 'src')).filter((f) => /worker\.(mjs|ts)$/.test(f))];
    const { files, packages } = importGraph(entries);
    expect(files.some((f) => f.endsWith(path.join('src', 'cli', 'main.ts')))).toBe(true);
    for (const f of ['src/daemon/shard.ts', 'src/forecast/engine.ts', 'src/store/embedded.ts']) expect(files).toContain(path.join(root, f));
    expect(packages.has('zod')).toBe(true); // the walk reaches real imports
    const missing = [...packages].filter((name) => !prod.has(name));
    expect(missing).toEqual([]);
  });
});

function listFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((e) => {
    const p = path.join(dir, e);
    return statSync(p).isDirectory() ? listFiles(p) : [p];
  });
}

/**
 * Relative modules a file may load: static and dynamic imports, `new URL('./x.mjs', import.meta.url)`
 * (worker files) and module paths kept in string lists (the CLI's optional commands). Any quoted
 * relative path to a .ts/.mjs/.js file counts, which errs towards checking more files.
 */
function relativeImports(src: string): string[] {
  const out: string[] = [];
  for (const m of src.matchAll(/^\s*(?:import|export)\s+type\s[^;]*?from\s*['"](\.[^'"]+)['"]/gm)) out.push(`type:${m[1]}`);
  const typeOnly = new Set(out.map((s) => s.slice(5)));
  out.length = 0;
  for (const m of src.matchAll(/['"](\.\.?\/[^'"\s]+\.(?:ts|mjs|js))['"]/g)) if (!typeOnly.has(m[1])) out.push(m[1]);
  return out;
}

/** Every file reachable from the entries through relative imports, and the packages they load. */
function importGraph(entries: string[]): { files: string[]; packages: Set<string> } {
  const seen = new Set<string>();
  const packages = new Set<string>();
  const queue = [...entries];
  while (queue.length) {
    const f = queue.pop()!;
    if (seen.has(f) || !existsSync(f) || !/\.(ts|mjs|js)$/.test(f)) continue;
    seen.add(f);
    const src = readFileSync(f, 'utf8');
    for (const name of bareImports(src)) packages.add(name);
    for (const rel of relativeImports(src)) queue.push(path.resolve(path.dirname(f), rel));
  }
  return { files: [...seen], packages };
}

/** Package names a module loads at run time (type-only imports and node builtins left out). */
function bareImports(src: string): string[] {
  const names: string[] = [];
  const re = /^\s*(import|export)\s+(type\s+)?(?:[^'";]*?\sfrom\s*)?['"]([^'"]+)['"]|import\(\s*['"]([^'"]+)['"]\s*\)/gm;
  for (const m of src.matchAll(re)) {
    if (m[2]) continue;
    const s = m[3] ?? m[4];
    if (!s || s.startsWith('.') || s.startsWith('/') || s.startsWith('node:')) continue;
    const name = s.startsWith('@') ? s.split('/').slice(0, 2).join('/') : s.split('/')[0];
    if (!BUILTINS.has(name)) names.push(name);
  }
  return names;
}

const BUILTINS = new Set(['fs', 'path', 'os', 'url', 'http', 'https', 'crypto', 'events', 'stream', 'worker_threads', 'child_process', 'util', 'net', 'zlib', 'readline', 'assert', 'perf_hooks', 'timers', 'buffer', 'process', 'v8', 'dns', 'tty']);

// ---------------------------------------------------------------- health-check script

describe('deploy/healthcheck.mjs', () => {
  let server: Server;
  let base = '';
  let status = 200;
  beforeAll(async () => {
    server = createServer((req, res) => {
      res.statusCode = req.url === '/healthz' ? status : 404;
      res.end('ok');
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    base = `http://127.0.0.1:${(server.address() as AddressInfo).port}`;
  });
  afterAll(() => new Promise<void>((r) => server.close(() => r())));

  const check = (url: string) =>
    new Promise<{ code: number | null; stderr: string }>((resolve) => {
      const child = spawn(process.execPath, [path.join(deploy, 'healthcheck.mjs')], {
        env: { ...process.env, RADCAST_HEALTH_URL: url, RADCAST_HEALTH_TIMEOUT_MS: '2000' },
      });
      let stderr = '';
      child.stderr.on('data', (d) => (stderr += d));
      child.on('close', (code) => resolve({ code, stderr }));
    });

  it('exits 0 when /healthz answers 200', async () => {
    status = 200;
    expect((await check(`${base}/healthz`)).code).toBe(0);
  });

  it('exits 1 when /healthz answers 503', async () => {
    status = 503;
    const r = await check(`${base}/healthz`);
    expect(r.code).toBe(1);
    expect(r.stderr).toContain('503');
  });

  it('exits 1 when nothing listens', async () => {
    const probe = createServer();
    await new Promise<void>((r) => probe.listen(0, '127.0.0.1', r));
    const port = (probe.address() as AddressInfo).port;
    await new Promise<void>((r) => probe.close(() => r()));
    const r = await check(`http://127.0.0.1:${port}/healthz`);
    expect(r.code).toBe(1);
    expect(r.stderr).toContain('unreachable');
  });

  it('passes against radcast\'s own HTTP server, which also serves the k8s probe paths', async () => {
    let ready = true;
    const http = new HttpServer({
      host: '127.0.0.1',
      port: 0,
      source: {
        statuses: () => [],
        readiness: async () => ({ store: { ok: ready } }),
        chartData: async () => null,
      },
      metrics: new DaemonMetrics({ defaultMetrics: false }),
      logger: pino({ level: 'silent' }),
    });
    const addr = await http.start();
    try {
      const url = `http://127.0.0.1:${addr.port}`;
      expect((await check(`${url}/healthz`)).code).toBe(0);
      expect((await fetch(`${url}/readyz`)).status).toBe(200);
      ready = false;
      expect((await fetch(`${url}/readyz`)).status).toBe(503);
      // Liveness stays green while the store is away: the pod is not restarted for a store outage.
      expect((await check(`${url}/healthz`)).code).toBe(0);
    } finally {
      await http.stop();
    }
  });

  it('defaults to the port of the config schema', () => {
    const port = ConfigSchema.parse({ series: [{ name: 'tarrow-hill' }] }).http.port;
    expect(read('deploy/healthcheck.mjs')).toContain(`http://127.0.0.1:${port}/healthz`);
    expect(read('deploy/Containerfile')).toMatch(new RegExp(`^EXPOSE ${port}$`, 'm'));
  });
});

// ---------------------------------------------------------------- kubernetes

const CONTAINER_UID = 10001;

type Obj = Record<string, any>;
const k8sDir = path.join(deploy, 'k8s');
const k8sFiles = readdirSync(k8sDir).filter((f) => f.endsWith('.yaml') && f !== 'kustomization.yaml');
const docs: { file: string; obj: Obj }[] = k8sFiles.flatMap((file) =>
  parseAllDocuments(readFileSync(path.join(k8sDir, file), 'utf8'), { version: '1.1' }).map((d) => {
    if (d.errors.length) throw new Error(`${file}: ${d.errors[0].message}`);
    return { file, obj: d.toJS() as Obj };
  }),
);
const byKind = (kind: string) => docs.filter((d) => d.obj.kind === kind).map((d) => d.obj);
const models: Record<string, { new (o: Obj): { validate(): void } }> = { StatefulSet, ConfigMap, Secret, Service };
const typeImports: Record<string, string> = {
  StatefulSet: "import type { IStatefulSet as StatefulSet } from 'kubernetes-models/apps/v1/StatefulSet';",
  ConfigMap: "import type { IConfigMap as ConfigMap } from 'kubernetes-models/v1/ConfigMap';",
  Secret: "import type { ISecret as Secret } from 'kubernetes-models/v1/Secret';",
  Service: "import type { IService as Service } from 'kubernetes-models/v1/Service';",
};

/** TypeScript diagnostics of `const m: Kind = <object literal>` for each doc (excess property checks). */
function strictTypeCheck(objs: Obj[]): string[] {
  const virtualFile = path.join(root, 'tests/unit/deploy/__k8s_manifests__.ts');
  const kinds = [...new Set(objs.map((o) => o.kind))];
  const code = [
    ...kinds.map((k) => typeImports[k]),
    ...objs.map((o, i) => `export const m${i}: ${o.kind} = ${JSON.stringify(o, null, 1)};`),
  ].join('\n');
  const options: ts.CompilerOptions = {
    strict: true,
    noEmit: true,
    skipLibCheck: true,
    module: ts.ModuleKind.NodeNext,
    moduleResolution: ts.ModuleResolutionKind.NodeNext,
    target: ts.ScriptTarget.ES2022,
    types: [],
  };
  const host = ts.createCompilerHost(options);
  const getSourceFile = host.getSourceFile.bind(host);
  host.getSourceFile = (name, lang, ...rest) =>
    name === virtualFile ? ts.createSourceFile(name, code, lang) : getSourceFile(name, lang, ...rest);
  const fileExists = host.fileExists.bind(host);
  host.fileExists = (name) => name === virtualFile || fileExists(name);
  const program = ts.createProgram([virtualFile], options, host);
  const sf = program.getSourceFile(virtualFile)!;
  return [...program.getSemanticDiagnostics(sf), ...program.getSyntacticDiagnostics(sf)].map((d) => ts.flattenDiagnosticMessageText(d.messageText, '\n'));
}

describe('deploy/k8s manifests', () => {
  const sts = byKind('StatefulSet')[0];
  const svc = byKind('Service')[0];
  const cm = byKind('ConfigMap')[0];
  const secret = byKind('Secret')[0];
  const pod = sts?.spec?.template?.spec;
  const container = pod?.containers?.[0];
  const env = Object.fromEntries((container?.env ?? []).map((e: Obj) => [e.name, e.value]));
  const mountOf = (volumeName: string) => container.volumeMounts.find((m: Obj) => m.name === volumeName);

  it('contains one StatefulSet, headless Service, ConfigMap and Secret', () => {
    expect(docs.map((d) => d.obj.kind).sort()).toEqual(['ConfigMap', 'Secret', 'Service', 'StatefulSet']);
  });

  it('every object validates against the Kubernetes OpenAPI schema', () => {
    for (const { file, obj } of docs) {
      const Model = models[obj.kind];
      expect(Model, `${file}: kind ${obj.kind} has a validator`).toBeDefined();
      expect(() => new Model(obj).validate(), file).not.toThrow();
    }
  });

  it('the schema check rejects a broken StatefulSet (the check can fail)', () => {
    const bad = structuredClone(sts);
    bad.spec.replicas = 'two';
    delete bad.spec.selector;
    expect(() => new StatefulSet(bad).validate()).toThrow(/replicas must be integer|required property 'selector'/);
  });

  it('has no unknown fields (TypeScript excess property check against the API types)', () => {
    expect(strictTypeCheck(docs.map((d) => d.obj))).toEqual([]);
  }, 60_000);

  it('the unknown-field check catches a misspelt probe (the check can fail)', () => {
    const bad = structuredClone(sts);
    bad.spec.template.spec.containers[0].readinessProbee = bad.spec.template.spec.containers[0].readinessProbe;
    const errs = strictTypeCheck([bad]);
    expect(errs.join('\n')).toMatch(/'"?readinessProbee"?' does not exist in type 'IContainer'/);
  }, 60_000);

  it('kustomization.yaml lists every manifest', () => {
    const k = parseYaml(readFileSync(path.join(k8sDir, 'kustomization.yaml'), 'utf8'));
    expect([...k.resources].sort()).toEqual([...k8sFiles].sort());
  });

  it('the Service is headless, named as the StatefulSet serviceName, and selects the pods', () => {
    expect(svc.spec.clusterIP).toBe('None');
    expect(sts.spec.serviceName).toBe(svc.metadata.name);
    const podLabels = sts.spec.template.metadata.labels;
    for (const [k, v] of Object.entries(svc.spec.selector)) expect(podLabels[k]).toBe(v);
    for (const [k, v] of Object.entries(sts.spec.selector.matchLabels)) expect(podLabels[k]).toBe(v);
    expect(svc.spec.ports[0].targetPort).toBe(container.ports[0].name);
  });

  it('gives every pod ordinal its own shard and all shards a pod', () => {
    expect(Number(env.RADCAST_SHARDS)).toBe(sts.spec.replicas);
    const seen = new Set<number>();
    for (let i = 0; i < sts.spec.replicas; i++) {
      const r = resolveShard({ env, hostname: () => `${sts.metadata.name}-${i}` });
      expect(r.ok).toBe(true);
      if (r.ok) {
        expect(r.shard).toEqual({ index: i, count: sts.spec.replicas, source: 'hostname' });
        seen.add(r.shard.index);
      }
    }
    expect(seen.size).toBe(sts.spec.replicas);
    // One more pod than shards refuses to start instead of double-forecasting.
    const extra = resolveShard({ env, hostname: () => `${sts.metadata.name}-${sts.spec.replicas}` });
    expect(extra.ok).toBe(false);
  });

  it('probes /readyz for readiness and /healthz for liveness on the config port', () => {
    expect(container.readinessProbe.httpGet.path).toBe('/readyz');
    expect(container.livenessProbe.httpGet.path).toBe('/healthz');
    expect(container.readinessProbe.httpGet.port).toBe('http');
    expect(container.livenessProbe.httpGet.port).toBe('http');
    const config = ConfigSchema.parse(parseYaml(cm.data['radcast.yaml']));
    expect(container.ports.find((p: Obj) => p.name === 'http').containerPort).toBe(config.http.port);
    expect(config.http.address).toBe('0.0.0.0');
  });

  it('the ConfigMap holds a config that radcast accepts, read from where the args say', () => {
    const r = ConfigSchema.safeParse(parseYaml(cm.data['radcast.yaml']));
    expect(r.success, r.success ? '' : JSON.stringify(r.error.issues)).toBe(true);
    const configArg = container.args[container.args.indexOf('--config') + 1];
    const vol = pod.volumes.find((v: Obj) => v.configMap?.name === cm.metadata.name);
    expect(path.posix.join(mountOf(vol.name).mountPath, 'radcast.yaml')).toBe(configArg);
  });

  it('reads the token from the mounted Secret, which holds a placeholder only', () => {
    const config = ConfigSchema.parse(parseYaml(cm.data['radcast.yaml']));
    const vol = pod.volumes.find((v: Obj) => v.secret?.secretName === secret.metadata.name);
    const mount = mountOf(vol.name);
    expect(config.store.influxdb?.tokenFile).toBe(path.posix.join(mount.mountPath, 'token'));
    expect(Object.keys(secret.stringData ?? {})).toEqual(['token']);
    expect(secret.data).toBeUndefined();
    expect(secret.stringData.token).toMatch(/^REPLACE-/);
    // Readable by the pod's group (fsGroup), not by others: 0440.
    expect(vol.secret.defaultMode).toBe(0o440);
  });

  it('keeps local state on the per-pod volume', () => {
    const config = ConfigSchema.parse(parseYaml(cm.data['radcast.yaml']));
    const claim = sts.spec.volumeClaimTemplates[0].metadata.name;
    expect(config.state.path.startsWith(mountOf(claim).mountPath + '/')).toBe(true);
  });

  it('runs without root, with a read-only root filesystem and a writable /tmp', () => {
    expect(pod.securityContext.runAsNonRoot).toBe(true);
    expect(pod.securityContext.runAsUser).toBe(CONTAINER_UID);
    expect(container.securityContext.allowPrivilegeEscalation).toBe(false);
    expect(container.securityContext.readOnlyRootFilesystem).toBe(true);
    expect(container.securityContext.capabilities.drop).toEqual(['ALL']);
    const tmp = container.volumeMounts.find((m: Obj) => m.mountPath === '/tmp');
    expect(pod.volumes.find((v: Obj) => v.name === tmp.name).emptyDir).toBeDefined();
    for (const m of container.volumeMounts) expect(pod.volumes.some((v: Obj) => v.name === m.name) || m.name === 'state').toBe(true);
  });

  it('requests one core per fit worker, requests memory and caps it', () => {
    const config = ConfigSchema.parse(parseYaml(cm.data['radcast.yaml']));
    expect(Number(container.resources.requests.cpu)).toBe(config.daemon.concurrency);
    expect(container.resources.requests.memory).toMatch(/^\d+(Mi|Gi)$/);
    expect(container.resources.limits.memory).toMatch(/^\d+(Mi|Gi)$/);
  });
});
