/**
 * Fit speed: median wall time per fit over N x d x K (H = 24), cold and warm-started, side by
 * side with the numpy / scikit-learn reference in ../shared/reference on the same synthetic data
 * (its gen_data.py), plus the throughput of the k-means distance pass.
 *
 *   npm run bench -- fit [--quick] [--runs N] [--no-ref] [--ref own|sklearn|both]
 *
 * --quick: N=1344 d=40 K=32 and N=8760 d=40 K=64 only, 3 runs. Cold = fit from scratch with
 * DEFAULT_FIT_OPTIONS (K set per row); warm = the same fit warm-started from the model of the
 * window one day (24 rows) shorter, as the daemon's rolling refit does.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { DEFAULT_FIT_OPTIONS, fitRbf } from '../../src/model/index.ts';
import type { Dense, FitOptions } from '../../src/model/types.ts';
import { distanceKernels } from '../../src/model/distance.ts';
import { flagValue, median } from '../args.ts';
import { mulberry32 } from '../../src/model/random.ts';

const H = 24;
/** Timed work per cell and kind (cold / warm), beside the minimum number of runs. */
const MIN_TIMED_MS = 1500;
const here = path.dirname(fileURLToPath(import.meta.url));
const refDir = path.resolve(here, '..', '..', '..', 'shared', 'reference');
const python = '/usr/bin/python3';

function load(file: string, cols: number): Dense {
  const b = readFileSync(file);
  const data = new Float64Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.length));
  return { data, rows: data.length / cols, cols };
}

function rows(m: Dense, r0: number, r1: number): Dense {
  return { data: m.data.slice(r0 * m.cols, r1 * m.cols), rows: r1 - r0, cols: m.cols };
}

/** Same recipe as gen_data.py (AR(1) noise from mulberry32 instead of numpy) when python is missing. */
function jsData(N: number, d: number): { x: Dense; y: Dense } {
  const rnd = mulberry32(12345);
  const gauss = (): number => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const L = d - 4;
  const T = N + 40 + H + 1;
  const v = new Float64Array(T);
  let noise = 0;
  for (let t = 0; t < T; t++) {
    if (t > 0) noise = 0.8 * noise + 0.5 * gauss();
    const a = Math.sin((2 * Math.PI * t) / 24), b = Math.sin((2 * Math.PI * t) / 168);
    v[t] = 10 + 3 * a + 1.5 * b + 0.002 * t + noise + 0.3 * a * b;
  }
  const x = new Float64Array(N * d);
  const y = new Float64Array(N * H);
  for (let i = 0; i < N; i++) {
    const r = 40 + i;
    for (let l = 0; l < L; l++) x[i * d + l] = v[r - 1 - l];
    const hod = r % 24, dow = Math.floor(r / 24) % 7;
    x[i * d + L] = Math.sin((2 * Math.PI * hod) / 24);
    x[i * d + L + 1] = Math.cos((2 * Math.PI * hod) / 24);
    x[i * d + L + 2] = Math.sin((2 * Math.PI * dow) / 7);
    x[i * d + L + 3] = Math.cos((2 * Math.PI * dow) / 7);
    for (let h = 0; h < H; h++) y[i * H + h] = v[r + h];
  }
  for (let j = 0; j < d; j++) {
    let m = 0, q = 0;
    for (let i = 0; i < N; i++) m += x[i * d + j] / N;
    for (let i = 0; i < N; i++) q += (x[i * d + j] - m) ** 2 / N;
    for (let i = 0; i < N; i++) x[i * d + j] = (x[i * d + j] - m) / Math.sqrt(q);
  }
  for (let h = 0; h < H; h++) {
    let m = 0;
    for (let i = 0; i < N; i++) m += y[i * H + h] / N;
    for (let i = 0; i < N; i++) y[i * H + h] -= m;
  }
  return { x: { data: x, rows: N, cols: d }, y: { data: y, rows: N, cols: H } };
}

interface RefResult {
  median_s: number;
  cpu_median_s: number;
  lloyd_passes: number[];
}

function runReference(impl: 'own' | 'sklearn', dataDir: string, N: number, d: number, K: number, runs: number): RefResult | string {
  const r = spawnSync(python, [path.join(refDir, 'fit_numpy.py'), impl, '--data', dataDir, '--runs', String(runs), '--grid', `${N},${d},${K}`, '--quiet', '0'], {
    encoding: 'utf8',
    env: { ...process.env, PYTHONDONTWRITEBYTECODE: '1' },
    maxBuffer: 64 << 20,
  });
  if (r.status !== 0) return `failed: ${(r.stderr || '').trim().split('\n').pop()}`;
  try {
    return JSON.parse(r.stdout).records[0] as RefResult;
  } catch {
    return 'unparsable output';
  }
}

/**
 * Wall and CPU milliseconds of n runs after warm-up: at least 3 runs and 1 s, so the JIT has
 * optimised the TypeScript and tiered up the WebAssembly (a daemon runs thousands of fits).
 */
/**
 * At least n timed runs and at least minMs of timed work (short fits get more runs, so one
 * disturbed run on this shared machine moves the median less), after >= 3 warm-up runs and 1 s.
 */
function timeFits(n: number, f: () => void, minMs = MIN_TIMED_MS): { wall: number[]; cpu: number[] } {
  const w0 = performance.now();
  for (let i = 0; i < 3 || performance.now() - w0 < 1000; i++) f();
  const wall: number[] = [];
  const cpu: number[] = [];
  const t1 = performance.now();
  for (let i = 0; i < n || performance.now() - t1 < minMs; i++) {
    const c0 = process.cpuUsage();
    const t0 = performance.now();
    f();
    wall.push(performance.now() - t0);
    const c = process.cpuUsage(c0);
    cpu.push((c.user + c.system) / 1000);
  }
  return { wall, cpu };
}

/** Load average over the last minute per core: above ~1 other work shares the cores and wall times grow. */
function loadPerCore(): string {
  return (os.loadavg()[0] / os.cpus().length).toFixed(2);
}

function pad(s: string | number, w: number): string {
  return String(s).padStart(w);
}

export async function run(argv: string[]): Promise<void> {
  const quick = argv.includes('--quick');
  const runs = Number(flagValue(argv, '--runs') ?? (quick ? 3 : 5));
  const refMode = argv.includes('--no-ref') ? 'none' : (flagValue(argv, '--ref') ?? 'sklearn');
  const grid: [number, number, number][] = quick
    ? [[1344, 40, 32], [8760, 40, 64]]
    : [1344, 8760].flatMap((N) => [16, 40].flatMap((d) => [16, 32, 64, 128].map((K) => [N, d, K] as [number, number, number])));

  const havePython = refMode !== 'none' && existsSync(python) && existsSync(path.join(refDir, 'gen_data.py')) && spawnSync(python, ['-c', 'import numpy, sklearn, scipy']).status === 0;
  const dataDir = mkdtempSync(path.join(os.tmpdir(), 'radcast-fitbench-'));
  try {
    let source = 'JS copy of the gen_data.py recipe (python reference not available)';
    if (havePython) {
      const g = spawnSync(python, [path.join(refDir, 'gen_data.py'), dataDir], { encoding: 'utf8' });
      if (g.status === 0) source = `gen_data.py (${refDir})`;
    }
    const fromPython = source.startsWith('gen_data');
    console.log(`data: ${source}; runs per cell: >= ${runs} and >= ${MIN_TIMED_MS / 1000} s of timed fits (after >= 3 warm-up runs and 1 s); H=${H}; kernel: ${distanceKernels().active}`);
    console.log('medians in ms, wall (cpu); ratio = reference / radcast on wall (cpu) time, >1: radcast faster; cold/warm likewise');
    console.log(`load per core at start: ${loadPerCore()} (above ~1 the machine is shared and wall times are inflated; compare cpu)`);
    const head = ['N', 'd', 'K', 'cold', 'passes', 'warm', 'passes', 'cold/warm'];
    const refs = refMode === 'both' ? ['own', 'sklearn'] : refMode === 'none' || !fromPython ? [] : [refMode];
    for (const r of refs) head.push(`ref ${r}`, 'ratio');
    console.log(head.map((h, i) => pad(h, i < 3 ? 5 : i === 4 || i === 6 ? 6 : 15)).join(' '));
    const wc = (w: number, c: number, digits = 1): string => `${w.toFixed(digits)} (${c.toFixed(digits)})`;
    for (const [N, d, K] of grid) {
      const { x, y } = fromPython
        ? { x: load(path.join(dataDir, `X_${N}_${d}.f64`), d), y: load(path.join(dataDir, `Y_${N}.f64`), H) }
        : jsData(N, d);
      const o: FitOptions = { ...DEFAULT_FIT_OPTIONS, nCentres: K };
      let coldPasses = 0;
      const coldT = timeFits(runs, () => (coldPasses = fitRbf(x, y, o).report.kmeansPasses));
      const prev = fitRbf(rows(x, 0, N - 24), rows(y, 0, N - 24), o).model;
      let warmPasses = 0;
      const warmT = timeFits(runs, () => (warmPasses = fitRbf(x, y, { ...o, warmStart: prev }).report.kmeansPasses));
      const cold = median(coldT.wall), coldC = median(coldT.cpu);
      const warm = median(warmT.wall), warmC = median(warmT.cpu);
      const cells = [pad(N, 5), pad(d, 5), pad(K, 5), pad(wc(cold, coldC), 15), pad(coldPasses, 6), pad(wc(warm, warmC), 15), pad(warmPasses, 6), pad(wc(cold / warm, coldC / warmC, 2), 15)];
      for (const impl of refs) {
        const r = runReference(impl as 'own' | 'sklearn', dataDir, N, d, K, runs);
        if (typeof r === 'string') cells.push(pad(r, 15), pad('-', 15));
        else cells.push(pad(wc(r.median_s * 1e3, r.cpu_median_s * 1e3), 15), pad(wc((r.median_s * 1e3) / cold, (r.cpu_median_s * 1e3) / coldC, 2), 15));
      }
      console.log(cells.join(' '));
    }
  } finally {
    rmSync(dataDir, { recursive: true, force: true });
  }

  // Distance pass throughput: 2 N K d flops per pass (one multiply and one add per term of x.c).
  console.log('\nk-means distance pass |x|^2 + |c|^2 - 2 x.c (median of >= 15 passes and >= 1 s; GFLOP/s = 2 N K d / time, on wall and cpu time)');
  console.log('rows prepared once, as Lloyd keeps them; js / wasm: all n x K distances into a reused buffer; wasm-asg: a plain');
  console.log('Lloyd pass in the module over every row (distances, nearest and second nearest centre, bounds, member sums)');
  console.log(`load per core: ${loadPerCore()}`);
  console.log(['N', 'd', 'K', 'kernel', 'ms/pass', 'GFLOP/s', 'cpu GF/s'].map((h) => pad(h, 9)).join(' '));
  const k = distanceKernels();
  for (const [N, d, K] of quick ? [[8760, 40, 64]] : [[1344, 16, 32], [1344, 40, 32], [8760, 16, 64], [8760, 16, 128], [8760, 40, 64], [8760, 40, 128]]) {
    const { x } = jsData(N, d);
    const c = x.data.slice(0, K * d);
    for (const [name, prepare] of k.all) {
      const pass = prepare(x.data, N, d);
      const t = timeFits(15, () => pass(c, K), 1000);
      const ms = median(t.wall);
      const cms = median(t.cpu);
      const gf = (v: number): string => ((2 * N * K * d) / (v * 1e6)).toFixed(2);
      console.log([pad(N, 9), pad(d, 9), pad(K, 9), pad(name, 9), pad(ms.toFixed(3), 9), pad(gf(ms), 9), pad(gf(cms), 9)].join(' '));
    }
  }
}
