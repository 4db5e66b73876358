/**
 * Writes the SIMD kernels as WebAssembly text (kernels.wat, generated here because the register
 * blocks are repetitive) and compiles them with wat2wasm from the npm package `wabt` (dev
 * dependency) into kernels.wasm and kernels.wasm.ts (the bytes as base64, so loading needs no
 * file I/O and works the same in worker threads). Run after editing this file:
 *   npx tsx src/model/wasm/build.ts
 *
 * Kernel: C = A B (A m x k, B k x n, row-major float64, n even), 4 rows x 4 columns per register
 * block: per step of the shared axis, 2 vector loads of B, 4 splat loads of A, 8 f64x2 multiply-adds.
 * The distance variants store max(0, a2[i] + b2[j] - 2 C[i, j]) instead of C[i, j]; in the generic
 * one, mode 0 stores C, mode 2 adds A B to C (used to sum products over chunks of rows that fit in
 * cache), mode 3 adds only the blocks on and above the diagonal (j >= i rounded down to even), for
 * symmetric Gram matrices.
 */
import { writeFileSync } from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import wabtInit from 'wabt';

const dir = path.dirname(fileURLToPath(import.meta.url));

/** One register block of R rows x V vectors (2V columns) at rows i.., columns j.. */
/** Kernel variants: 'generic' (mode chosen at run time), 'dist' (distance form only), 'distIdx' (rows through an index list). */
type Variant = 'generic' | 'dist' | 'distIdx';

function block(R: number, V: number, variant: Variant = 'generic'): string {
  // Row r of the band: i + r, or idx[i + r] for the indexed variant (output rows stay i + r).
  const rowOf = (r: number) => (variant === 'distIdx' ? `(i32.load (i32.add (local.get $idx) (i32.shl (i32.add (local.get $i) (i32.const ${r})) (i32.const 2))))` : `(i32.add (local.get $i) (i32.const ${r}))`);
  const acc = (r: number, v: number) => `$s${r}${v}`;
  const lines: string[] = [];
  for (let r = 0; r < R; r++) for (let v = 0; v < V; v++) lines.push(`(local.set ${acc(r, v)} (f64x2.splat (f64.const 0)))`);
  // pointers: $q<r> = &A[i + r, 0], $pb = &B[0, j]; all advance once per step of the shared axis.
  for (let r = 0; r < R; r++) lines.push(`(local.set $q${r} (i32.add (local.get $a) (i32.mul ${rowOf(r)} (local.get $rowa))))`);
  lines.push('(local.set $pb (i32.add (local.get $b) (i32.shl (local.get $j) (i32.const 3))))');
  lines.push('(local.set $pend (i32.add (local.get $q0) (local.get $rowa)))');
  const body: string[] = [];
  for (let v = 0; v < V; v++) body.push(`(local.set $y${v} (v128.load offset=${16 * v} (local.get $pb)))`);
  for (let r = 0; r < R; r++) {
    body.push(`(local.set $x (v128.load64_splat (local.get $q${r})))`);
    for (let v = 0; v < V; v++) body.push(`(local.set ${acc(r, v)} (f64x2.add (local.get ${acc(r, v)}) (f64x2.mul (local.get $x) (local.get $y${v}))))`);
  }
  for (let r = 0; r < R; r++) body.push(`(local.set $q${r} (i32.add (local.get $q${r}) (i32.const 8)))`);
  body.push('(local.set $pb (i32.add (local.get $pb) (local.get $rowb)))');
  lines.push(`(block $lend (loop $lloop (br_if $lend (i32.ge_u (local.get $q0) (local.get $pend)))\n        ${body.join('\n        ')}\n        (br $lloop)))`);
  // Epilogue: store, or the clipped distance form max(0, (a2 + b2) - (acc + acc)). Per row one
  // destination pointer ($o, column offsets as immediates); the norms are loaded once per block.
  const dist = variant !== 'generic';
  if (dist) {
    for (let v = 0; v < V; v++) lines.push(`(local.set $y${v} (v128.load offset=${16 * v} (i32.add (local.get $b2) (i32.shl (local.get $j) (i32.const 3)))))`);
  }
  for (let r = 0; r < R; r++) {
    lines.push(`(local.set $o (i32.add (local.get $c) (i32.shl (i32.add (i32.mul (i32.add (local.get $i) (i32.const ${r})) (local.get $n)) (local.get $j)) (i32.const 3))))`);
    if (dist) lines.push(`(local.set $x (v128.load64_splat (i32.add (local.get $a2) (i32.shl ${rowOf(r)} (i32.const 3)))))`);
    for (let v = 0; v < V; v++) {
      const a = `(local.get ${acc(r, v)})`;
      const st = (val: string) => `(v128.store offset=${16 * v} (local.get $o) ${val})`;
      if (dist) lines.push(st(`(f64x2.pmax (f64x2.splat (f64.const 0)) (f64x2.sub (f64x2.add (local.get $x) (local.get $y${v})) (f64x2.add ${a} ${a})))`));
      else lines.push(`(if (i32.ge_u (local.get $mode) (i32.const 2)) (then ${st(`(f64x2.add (v128.load offset=${16 * v} (local.get $o)) ${a})`)}) (else ${st(a)}))`);
    }
  }
  return lines.join('\n      ');
}

/** 1/k! for k = 0..13 (Taylor coefficients of e^r; |r| <= ln(2)/2 keeps the truncation below 1e-17). */
const EXP_COEFFS = Array.from({ length: 14 }, (_, k) => {
  let f = 1;
  for (let i = 2; i <= k; i++) f *= i;
  return 1 / f;
});

/**
 * e^x for x <= 0 in one f64x2: local $x<v> in, $e<v> out. x = n ln2 + r (|r| <= ln2 / 2, ln 2 in
 * two parts so n ln2_hi is exact), e^r by Estrin's scheme (short dependency chains), times 2^n
 * built from exponent bits in two factors so each stays normal down to n = -1076 (the product
 * then underflows to 0 like Math.exp).
 */
function expBody(v: string): string {
  const c = (k: number) => `(f64x2.splat (f64.const ${EXP_COEFFS[k]}))`;
  const L = (n: string) => `(local.get $${n}${v})`;
  const pair = (k: number) => `(f64x2.add ${c(k)} (f64x2.mul ${c(k + 1)} ${L('r')}))`;
  const pow2 = (m: string) => `(i64x2.shl (i64x2.add (i64x2.extend_low_i32x4_s ${m}) (i64x2.splat (i64.const 1023))) (i32.const 52))`;
  return `(local.set $x${v} (f64x2.pmax ${L('x')} (f64x2.splat (f64.const -746))))
        (local.set $nf${v} (f64x2.nearest (f64x2.mul ${L('x')} (f64x2.splat (f64.const ${Math.LOG2E})))))
        (local.set $r${v} (f64x2.sub (f64x2.sub ${L('x')} (f64x2.mul ${L('nf')} (f64x2.splat (f64.const 0.693145751953125)))) (f64x2.mul ${L('nf')} (f64x2.splat (f64.const 1.42860682030941723212e-6)))))
        (local.set $r2${v} (f64x2.mul ${L('r')} ${L('r')}))
        (local.set $r4${v} (f64x2.mul ${L('r2')} ${L('r2')}))
        (local.set $q0${v} (f64x2.add ${pair(0)} (f64x2.mul ${pair(2)} ${L('r2')})))
        (local.set $q1${v} (f64x2.add ${pair(4)} (f64x2.mul ${pair(6)} ${L('r2')})))
        (local.set $q2${v} (f64x2.add ${pair(8)} (f64x2.mul ${pair(10)} ${L('r2')})))
        (local.set $q0${v} (f64x2.add ${L('q0')} (f64x2.mul ${L('q1')} ${L('r4')})))
        (local.set $q2${v} (f64x2.add ${L('q2')} (f64x2.mul ${pair(12)} ${L('r4')})))
        (local.set $ni${v} (i32x4.trunc_sat_f64x2_s_zero ${L('nf')}))
        (local.set $h1${v} (i32x4.shr_s ${L('ni')} (i32.const 1)))
        (local.set $e${v} (f64x2.mul (f64x2.mul (f64x2.add ${L('q0')} (f64x2.mul ${L('q2')} (f64x2.mul ${L('r4')} ${L('r4')}))) ${pow2(L('h1'))}) ${pow2(`(i32x4.sub ${L('ni')} ${L('h1')})`)}))`;
}

/**
 * One row i of a triangular solve with h right-hand sides (row bytes $rowh): B_i -= Σ_m L(i, m) B_m
 * for m in [from, to) (`at` is the element index of the L entry for $i and $m), then B_i /= L_ii.
 */
function substitutionRow(tag: string, from: string, to: string, at: string): string {
  return `(local.set $pbi (i32.add (local.get $b) (i32.mul (local.get $i) (local.get $rowh))))
      (local.set $m ${from})
      (block $mend${tag} (loop $mloop${tag} (br_if $mend${tag} (i32.ge_s (local.get $m) ${to}))
        (local.set $v (f64.load (i32.add (local.get $l) (i32.shl ${at} (i32.const 3)))))
        (if (f64.ne (local.get $v) (f64.const 0)) (then
          (local.set $x (f64x2.splat (local.get $v)))
          (local.set $pbm (i32.add (local.get $b) (i32.mul (local.get $m) (local.get $rowh))))
          (local.set $c (i32.const 0))
          (block $cend${tag} (loop $cloop${tag} (br_if $cend${tag} (i32.ge_s (local.get $c) (local.get $rowh)))
            (local.set $q (i32.add (local.get $pbi) (local.get $c)))
            (v128.store (local.get $q) (f64x2.sub (v128.load (local.get $q)) (f64x2.mul (local.get $x) (v128.load (i32.add (local.get $pbm) (local.get $c))))))
            (local.set $c (i32.add (local.get $c) (i32.const 16)))
            (br $cloop${tag})))))
        (local.set $m (i32.add (local.get $m) (i32.const 1)))
        (br $mloop${tag})))
      (local.set $x (f64x2.splat (f64.div (f64.const 1) (f64.load (i32.add (local.get $l) (i32.shl (i32.mul (local.get $i) (i32.add (local.get $p) (i32.const 1))) (i32.const 3)))))))
      (local.set $c (i32.const 0))
      (block $send${tag} (loop $sloop${tag} (br_if $send${tag} (i32.ge_s (local.get $c) (local.get $rowh)))
        (local.set $q (i32.add (local.get $pbi) (local.get $c)))
        (v128.store (local.get $q) (f64x2.mul (v128.load (local.get $q)) (local.get $x)))
        (local.set $c (i32.add (local.get $c) (i32.const 16)))
        (br $sloop${tag})))`;
}

/**
 * $s = |a - b|^2 in the difference form for rows at $pa and `pb` of $k values ($k2 = $k rounded
 * down to even): pairs of lanes, then the odd last value. Uses locals $l $acc $e $t.
 */
function diffSquared(pb: string): string {
  return `(local.set $acc (f64x2.splat (f64.const 0)))
      (local.set $l (i32.const 0))
      (block $lend (loop $lloop (br_if $lend (i32.ge_u (local.get $l) (local.get $k2)))
        (local.set $e (f64x2.sub (v128.load (i32.add (local.get $pa) (i32.shl (local.get $l) (i32.const 3))))
                                 (v128.load (i32.add (local.get ${pb}) (i32.shl (local.get $l) (i32.const 3))))))
        (local.set $acc (f64x2.add (local.get $acc) (f64x2.mul (local.get $e) (local.get $e))))
        (local.set $l (i32.add (local.get $l) (i32.const 2)))
        (br $lloop)))
      (local.set $s (f64.add (f64x2.extract_lane 0 (local.get $acc)) (f64x2.extract_lane 1 (local.get $acc))))
      (if (i32.and (local.get $k) (i32.const 1)) (then
        (local.set $t (f64.sub (f64.load (i32.add (local.get $pa) (i32.shl (local.get $k2) (i32.const 3))))
                               (f64.load (i32.add (local.get ${pb}) (i32.shl (local.get $k2) (i32.const 3))))))
        (local.set $s (f64.add (local.get $s) (f64.mul (local.get $t) (local.get $t))))))`;
}

/** sums row at $ps op= x row at $px (op: add | sub), two lanes at a time, then the odd tail. */
function rowUpdate(op: 'add' | 'sub'): string {
  return `(local.set $l (i32.const 0))
          (block $uend_${op} (loop $uloop_${op} (br_if $uend_${op} (i32.ge_u (local.get $l) (local.get $k2)))
            (v128.store (i32.add (local.get $ps) (i32.shl (local.get $l) (i32.const 3)))
              (f64x2.${op} (v128.load (i32.add (local.get $ps) (i32.shl (local.get $l) (i32.const 3)))) (v128.load (i32.add (local.get $px) (i32.shl (local.get $l) (i32.const 3))))))
            (local.set $l (i32.add (local.get $l) (i32.const 2)))
            (br $uloop_${op})))
          (if (i32.and (local.get $k) (i32.const 1)) (then
            (f64.store (i32.add (local.get $ps) (i32.shl (local.get $k2) (i32.const 3)))
              (f64.${op} (f64.load (i32.add (local.get $ps) (i32.shl (local.get $k2) (i32.const 3)))) (f64.load (i32.add (local.get $px) (i32.shl (local.get $k2) (i32.const 3))))))))`;
}

/** Address of element $idx of the array at $base (shift 2: i32, 3: f64). */
function at(base: string, idx: string, shift: 2 | 3): string {
  return `(i32.add (local.get ${base}) (i32.shl ${idx} (i32.const ${shift})))`;
}

function lloydPass(): string {
  const r = '(local.get $r)';
  return `;; lloydPass: one assignment pass of Lloyd's algorithm over m rows of x (k columns) and the
  ;; centres (c row-major n x k; ct, c2 transposed and padded to np for the distance kernel), with
  ;; the run's state in module memory: labels, upper, lower, own (per row), sums (n x k), counts,
  ;; half, moved (per centre), and todo (the rows to assign). mode 0: every row, from no labels;
  ;; mode 1: Hamerly bounds pick the rows (see kmeans.ts, boundScan and boundFilter); mode 2: bounds
  ;; updated, every row assigned (plain Lloyd). Changed rows move between the member sums.
  ;; Returns the number of rows whose label changed.
  (func (export "lloydPass") (param $x i32) (param $x2 i32) (param $m i32) (param $k i32)
      (param $ct i32) (param $c2 i32) (param $np i32) (param $c i32)
      (param $labels i32) (param $upper i32) (param $lower i32) (param $own i32)
      (param $todo i32) (param $sums i32) (param $counts i32) (param $half i32) (param $moved i32)
      (param $mode i32) (param $m1 f64) (param $m2 f64) (param $mk i32) (param $slack0 f64) (param $slackUnit f64)
      (param $dbuf i32) (param $lab i32) (param $best i32) (param $second i32) (result i32)
    (local $r i32) (local $q i32) (local $cnt i32) (local $ch i32) (local $a i32) (local $bk i32) (local $old i32)
    (local $pc i32) (local $l i32) (local $k2 i32) (local $pa i32) (local $ps i32) (local $px i32) (local $st i32) (local $cm i32) (local $useIdx i32)
    (local $acc v128) (local $e v128) (local $s f64) (local $t f64) (local $u f64) (local $lw f64) (local $z f64) (local $pcnt i32)
    (local.set $k2 (i32.and (local.get $k) (i32.const -2)))
    (if (i32.eqz (local.get $mode))
      (then (local.set $cnt (local.get $m)))
      (else
        (local.set $r (i32.const 0))
        (block $send (loop $sloop (br_if $send (i32.ge_s ${r} (local.get $m)))
          (local.set $a (i32.load ${at('$labels', r, 2)}))
          (local.set $lw (f64.sub (f64.load ${at('$lower', r, 3)}) (select (local.get $m2) (local.get $m1) (i32.eq (local.get $a) (local.get $mk)))))
          (f64.store ${at('$lower', r, 3)} (local.get $lw))
          (local.set $u (f64.add (f64.load ${at('$upper', r, 3)}) (f64.load ${at('$moved', '(local.get $a)', 3)})))
          (if (i32.eq (local.get $mode) (i32.const 1)) (then
            ;; bound z = max(l, half[a]) squared with its margin, and the rounding slack of this row
            (local.set $z (f64.load ${at('$half', '(local.get $a)', 3)}))
            (local.set $z (select (local.get $lw) (local.get $z) (f64.gt (local.get $lw) (local.get $z))))
            (local.set $z (f64.mul (f64.mul (local.get $z) (local.get $z)) (f64.const ${1 - 2e-9})))
            (local.set $t (f64.mul (local.get $slackUnit) (f64.load ${at('$x2', r, 3)})))
            (if (f64.ge (f64.add (f64.add (f64.mul (local.get $u) (local.get $u)) (local.get $slack0)) (local.get $t)) (local.get $z)) (then
              ;; the upper bound does not settle it: exact distance to the own centre, then the same test
              (local.set $lw (local.get $t))
              (local.set $pa (i32.add (local.get $x) (i32.shl (i32.mul ${r} (local.get $k)) (i32.const 3))))
              (local.set $pc (i32.add (local.get $c) (i32.shl (i32.mul (local.get $a) (local.get $k)) (i32.const 3))))
              ${diffSquared('$pc')}
              (f64.store ${at('$own', r, 3)} (local.get $s))
              (local.set $u (f64.sqrt (local.get $s)))
              (i32.store ${at('$todo', '(local.get $cnt)', 2)} ${r})
              (local.set $cnt (i32.add (local.get $cnt) (f64.ge (f64.add (f64.add (local.get $s) (local.get $slack0)) (local.get $lw)) (local.get $z))))))))
          (f64.store ${at('$upper', r, 3)} (local.get $u))
          (local.set $r (i32.add ${r} (i32.const 1)))
          (br $sloop)))
        (if (i32.eq (local.get $mode) (i32.const 2)) (then (local.set $cnt (local.get $m))))))
    (local.set $useIdx (i32.eq (local.get $mode) (i32.const 1)))
    (block $aend (loop $aloop (br_if $aend (i32.ge_s (local.get $st) (local.get $cnt)))
      (local.set $cm (i32.sub (local.get $cnt) (local.get $st)))
      (if (i32.gt_s (local.get $cm) (i32.const 32)) (then (local.set $cm (i32.const 32))))
      (if (local.get $useIdx)
        (then (call $kernelDistIdx (local.get $x) (local.get $cm) (local.get $k) (local.get $ct) (local.get $np) (local.get $dbuf)
          (i32.const 1) (local.get $x2) (local.get $c2) ${at('$todo', '(local.get $st)', 2)}))
        (else (call $kernelDist (i32.add (local.get $x) (i32.shl (i32.mul (local.get $st) (local.get $k)) (i32.const 3))) (local.get $cm) (local.get $k) (local.get $ct) (local.get $np) (local.get $dbuf)
          (i32.const 1) ${at('$x2', '(local.get $st)', 3)} (local.get $c2) (i32.const 0))))
      (call $argmin2 (local.get $dbuf) (local.get $cm) (local.get $np) (local.get $lab) (local.get $best) (local.get $second))
      (local.set $q (i32.const 0))
      (block $qend (loop $qloop (br_if $qend (i32.ge_s (local.get $q) (local.get $cm)))
        (local.set $r (if (result i32) (local.get $useIdx)
          (then (i32.load ${at('$todo', '(i32.add (local.get $st) (local.get $q))', 2)}))
          (else (i32.add (local.get $st) (local.get $q)))))
        (local.set $bk (i32.load ${at('$lab', '(local.get $q)', 2)}))
        (local.set $old (i32.load ${at('$labels', r, 2)}))
        (if (i32.ne (local.get $old) (local.get $bk)) (then
          (local.set $ch (i32.add (local.get $ch) (i32.const 1)))
          (local.set $px (i32.add (local.get $x) (i32.shl (i32.mul ${r} (local.get $k)) (i32.const 3))))
          (if (i32.ge_s (local.get $old) (i32.const 0)) (then
            (local.set $pcnt ${at('$counts', '(local.get $old)', 2)})
            (i32.store (local.get $pcnt) (i32.sub (i32.load (local.get $pcnt)) (i32.const 1)))
            (local.set $ps (i32.add (local.get $sums) (i32.shl (i32.mul (local.get $old) (local.get $k)) (i32.const 3))))
            ${rowUpdate('sub')}))
          (local.set $pcnt ${at('$counts', '(local.get $bk)', 2)})
          (i32.store (local.get $pcnt) (i32.add (i32.load (local.get $pcnt)) (i32.const 1)))
          (local.set $ps (i32.add (local.get $sums) (i32.shl (i32.mul (local.get $bk) (local.get $k)) (i32.const 3))))
          ${rowUpdate('add')}
          (i32.store ${at('$labels', r, 2)} (local.get $bk))))
        (local.set $s (f64.load ${at('$best', '(local.get $q)', 3)}))
        (f64.store ${at('$own', r, 3)} (local.get $s))
        (f64.store ${at('$upper', r, 3)} (f64.sqrt (local.get $s)))
        (f64.store ${at('$lower', r, 3)} (f64.sqrt (f64.load ${at('$second', '(local.get $q)', 3)})))
        (local.set $q (i32.add (local.get $q) (i32.const 1)))
        (br $qloop)))
      (local.set $st (i32.add (local.get $st) (i32.const 32)))
      (br $aloop)))
    (local.get $ch))`;
}

function kernel(variant: Variant = 'generic'): string {
  const locals = ['(local $i i32) (local $j i32) (local $pb i32) (local $pend i32) (local $rowa i32) (local $rowb i32) (local $o i32)', '(local $q0 i32) (local $q1 i32) (local $q2 i32) (local $q3 i32)', '(local $x v128) (local $y0 v128) (local $y1 v128)'];
  for (let r = 0; r < 4; r++) locals.push(`(local $s${r}0 v128) (local $s${r}1 v128)`);
  // Column loop for a band of R rows: blocks of 4 columns, then one of 2.
  const band = (R: number) => `(local.set $j (if (result i32) (i32.eq (local.get $mode) (i32.const 3)) (then (i32.and (local.get $i) (i32.const -2))) (else (i32.const 0))))
    (block $jend${R} (loop $jloop${R} (br_if $jend${R} (i32.gt_s (i32.add (local.get $j) (i32.const 4)) (local.get $n)))
      ${block(R, 2, variant)}
      (local.set $j (i32.add (local.get $j) (i32.const 4)))
      (br $jloop${R})))
    (if (i32.lt_s (local.get $j) (local.get $n)) (then
      ${block(R, 1, variant)}))`;
  const name = variant === 'generic' ? '$kernel' : variant === 'dist' ? '$kernelDist' : '$kernelDistIdx';
  return `(func ${name} (param $a i32) (param $m i32) (param $k i32) (param $b i32) (param $n i32) (param $c i32)
      (param $mode i32) (param $a2 i32) (param $b2 i32) (param $idx i32)
    ${locals.join('\n    ')}
    (local.set $rowa (i32.shl (local.get $k) (i32.const 3)))
    (local.set $rowb (i32.shl (local.get $n) (i32.const 3)))
    (local.set $i (i32.const 0))
    (block $iend (loop $iloop (br_if $iend (i32.gt_s (i32.add (local.get $i) (i32.const 4)) (local.get $m)))
    ${band(4)}
    (local.set $i (i32.add (local.get $i) (i32.const 4)))
    (br $iloop)))
    (block $iend1 (loop $iloop1 (br_if $iend1 (i32.ge_s (local.get $i) (local.get $m)))
    ${band(1)}
    (local.set $i (i32.add (local.get $i) (i32.const 1)))
    (br $iloop1))))`;
}

const wat = `;; Generated by src/model/wasm/build.ts; edit that file, not this one.
;; gemm(a, m, k, b, n, c):               C = A B          (A m x k, B k x n, n even; row-major f64)
;; gemmAdd(a, m, k, b, n, c):            C += A B
;; gemmAddUpper(a, m, k, b, n, c):       C += A B on and above the diagonal (A B symmetric)
;; dist2(a, m, k, b, n, a2, b2, c):      C[i,j] = max(0, a2[i] + b2[j] - 2 (A B)[i,j])
;; transpose(src, rows, cols, stride, dst): dst = src^T
;; ownDist(x, m, k, c, labels, out):    out[i] = |x_i - c_labels[i]|^2
;; cholesky(a, p) -> 0 | i + 1:          in-place lower Cholesky factor (row-major)
;; cholSolve(l, p, b, h):               B := (L L^T)^-1 B in place (h even)
;; centreGaps(c, n, k, half):          half the distance from each centre to the nearest other one
;; meanVariance(x, m, k, acc) -> f64:   mean over the k columns of each column's variance (acc: 2k scratch)
;; padRows(p, n, w, we):               n rows of w values at p spread in place to stride we (> w), pad zeroed
;; lloydPass(...):                      one pruned or full assignment pass of Lloyd's algorithm (state in memory)
;; expNeg(g, d, m, k, out):             out[i,j] = exp(-g[j] d[i,j])   (k even)
;; Pointers are byte offsets into the exported memory (16-byte aligned).
(module
  (memory (export "memory") 1)
  ${kernel()}
  ${kernel('dist')}
  ${kernel('distIdx')}
  (func (export "gemm") (param $a i32) (param $m i32) (param $k i32) (param $b i32) (param $n i32) (param $c i32)
    (call $kernel (local.get $a) (local.get $m) (local.get $k) (local.get $b) (local.get $n) (local.get $c)
      (i32.const 0) (i32.const 0) (i32.const 0) (i32.const 0)))
  (func (export "gemmAdd") (param $a i32) (param $m i32) (param $k i32) (param $b i32) (param $n i32) (param $c i32)
    (call $kernel (local.get $a) (local.get $m) (local.get $k) (local.get $b) (local.get $n) (local.get $c)
      (i32.const 2) (i32.const 0) (i32.const 0) (i32.const 0)))
  ;; out[i] = |x_i - c_{labels[i]}|^2 (difference form; x m x k, c row-major, labels i32).
  (func (export "ownDist") (param $x i32) (param $m i32) (param $k i32) (param $c i32) (param $labels i32) (param $out i32)
    (local $i i32) (local $l i32) (local $k2 i32) (local $pa i32) (local $pc i32) (local $acc v128) (local $e v128) (local $s f64) (local $t f64)
    (local.set $k2 (i32.and (local.get $k) (i32.const -2)))
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $m)))
      (local.set $pa (i32.add (local.get $x) (i32.shl (i32.mul (local.get $i) (local.get $k)) (i32.const 3))))
      (local.set $pc (i32.add (local.get $c) (i32.shl (i32.mul (i32.load (i32.add (local.get $labels) (i32.shl (local.get $i) (i32.const 2)))) (local.get $k)) (i32.const 3))))
      ${diffSquared('$pc')}
      (f64.store (i32.add (local.get $out) (i32.shl (local.get $i) (i32.const 3))) (local.get $s))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop))))
  ;; k-means++ step: minD2[i] = min(minD2[i], |x_i - c|^2) (or = when first), returns the sum.
  (func (export "seedUpdate") (param $x i32) (param $m i32) (param $k i32) (param $c i32) (param $mind i32) (param $first i32) (result f64)
    (local $i i32) (local $l i32) (local $k2 i32) (local $pa i32) (local $acc v128) (local $e v128) (local $s f64) (local $t f64) (local $sum f64) (local $pm i32)
    (local.set $k2 (i32.and (local.get $k) (i32.const -2)))
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $m)))
      (local.set $pa (i32.add (local.get $x) (i32.shl (i32.mul (local.get $i) (local.get $k)) (i32.const 3))))
      ${diffSquared('$c')}
      (local.set $pm (i32.add (local.get $mind) (i32.shl (local.get $i) (i32.const 3))))
      (if (i32.eqz (local.get $first)) (then (local.set $t (f64.load (local.get $pm))) (local.set $s (select (local.get $s) (local.get $t) (f64.lt (local.get $s) (local.get $t))))))
      (f64.store (local.get $pm) (local.get $s))
      (local.set $sum (f64.add (local.get $sum) (local.get $s)))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop)))
    (local.get $sum))
  ;; dst (cols x rows) = transpose of src (rows x cols, row stride \$stride values).
  (func (export "transpose") (param $src i32) (param $rows i32) (param $cols i32) (param $stride i32) (param $dst i32)
    (local $i i32) (local $j i32) (local $ps i32)
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $rows)))
      (local.set $ps (i32.add (local.get $src) (i32.shl (i32.mul (local.get $i) (local.get $stride)) (i32.const 3))))
      (local.set $j (i32.const 0))
      (block $jend (loop $jloop (br_if $jend (i32.ge_s (local.get $j) (local.get $cols)))
        (f64.store (i32.add (local.get $dst) (i32.shl (i32.add (i32.mul (local.get $j) (local.get $rows)) (local.get $i)) (i32.const 3)))
          (f64.load (i32.add (local.get $ps) (i32.shl (local.get $j) (i32.const 3)))))
        (local.set $j (i32.add (local.get $j) (i32.const 1)))
        (br $jloop)))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop))))
  ;; In-place Cholesky (row-major p x p, lower triangle read and written; the upper part is left
  ;; as it was): l_ij = (a_ij - sum_{m<j} l_im l_jm) / l_jj, l_ii = sqrt(a_ii - sum_{m<i} l_im^2).
  ;; Returns 0, or i + 1 when pivot i is not positive (singular or indefinite to working precision).
  (func (export "cholesky") (param $a i32) (param $p i32) (result i32)
    (local $i i32) (local $j i32) (local $m i32) (local $j4 i32) (local $pi i32) (local $pj i32) (local $rowb i32)
    (local $acc v128) (local $acc2 v128) (local $s f64)
    (local.set $rowb (i32.shl (local.get $p) (i32.const 3)))
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $p)))
      (local.set $pi (i32.add (local.get $a) (i32.mul (local.get $i) (local.get $rowb))))
      (local.set $j (i32.const 0))
      (block $jend (loop $jloop (br_if $jend (i32.gt_s (local.get $j) (local.get $i)))
        (local.set $pj (i32.add (local.get $a) (i32.mul (local.get $j) (local.get $rowb))))
        (local.set $acc (f64x2.splat (f64.const 0)))
        (local.set $acc2 (f64x2.splat (f64.const 0)))
        (local.set $j4 (i32.and (local.get $j) (i32.const -4)))
        (local.set $m (i32.const 0))
        (block $mend (loop $mloop (br_if $mend (i32.ge_s (local.get $m) (local.get $j4)))
          (local.set $acc (f64x2.add (local.get $acc) (f64x2.mul
            (v128.load (i32.add (local.get $pi) (i32.shl (local.get $m) (i32.const 3))))
            (v128.load (i32.add (local.get $pj) (i32.shl (local.get $m) (i32.const 3)))))))
          (local.set $acc2 (f64x2.add (local.get $acc2) (f64x2.mul
            (v128.load offset=16 (i32.add (local.get $pi) (i32.shl (local.get $m) (i32.const 3))))
            (v128.load offset=16 (i32.add (local.get $pj) (i32.shl (local.get $m) (i32.const 3)))))))
          (local.set $m (i32.add (local.get $m) (i32.const 4)))
          (br $mloop)))
        (local.set $acc (f64x2.add (local.get $acc) (local.get $acc2)))
        (if (i32.le_s (i32.add (local.get $m) (i32.const 2)) (local.get $j)) (then
          (local.set $acc (f64x2.add (local.get $acc) (f64x2.mul
            (v128.load (i32.add (local.get $pi) (i32.shl (local.get $m) (i32.const 3))))
            (v128.load (i32.add (local.get $pj) (i32.shl (local.get $m) (i32.const 3)))))))
          (local.set $m (i32.add (local.get $m) (i32.const 2)))))
        (local.set $s (f64.add (f64x2.extract_lane 0 (local.get $acc)) (f64x2.extract_lane 1 (local.get $acc))))
        (if (i32.lt_s (local.get $m) (local.get $j)) (then
          (local.set $s (f64.add (local.get $s) (f64.mul
            (f64.load (i32.add (local.get $pi) (i32.shl (local.get $m) (i32.const 3))))
            (f64.load (i32.add (local.get $pj) (i32.shl (local.get $m) (i32.const 3)))))))))
        (local.set $s (f64.sub (f64.load (i32.add (local.get $pi) (i32.shl (local.get $j) (i32.const 3)))) (local.get $s)))
        (if (i32.eq (local.get $i) (local.get $j))
          (then
            (if (i32.eqz (f64.gt (local.get $s) (f64.const 0))) (then (return (i32.add (local.get $i) (i32.const 1)))))
            (f64.store (i32.add (local.get $pi) (i32.shl (local.get $i) (i32.const 3))) (f64.sqrt (local.get $s))))
          (else
            (f64.store (i32.add (local.get $pi) (i32.shl (local.get $j) (i32.const 3)))
              (f64.div (local.get $s) (f64.load (i32.add (local.get $pj) (i32.shl (local.get $j) (i32.const 3))))))))
        (local.set $j (i32.add (local.get $j) (i32.const 1)))
        (br $jloop)))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop)))
    (i32.const 0))
  ;; Solves L L^T X = B in place for B (p x h, row-major, h even) with L from "cholesky" (p x p,
  ;; lower triangle): forward L U = B row by row, then backward L^T X = U.
  (func (export "cholSolve") (param $l i32) (param $p i32) (param $b i32) (param $h i32)
    (local $i i32) (local $m i32) (local $c i32) (local $pbi i32) (local $pbm i32) (local $rowh i32) (local $x v128) (local $v f64) (local $q i32)
    (local.set $rowh (i32.shl (local.get $h) (i32.const 3)))
    ;; forward
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $p)))
      ${substitutionRow('f', '(i32.const 0)', '(local.get $i)', '(i32.add (i32.mul (local.get $i) (local.get $p)) (local.get $m))')}
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop)))
    ;; backward
    (local.set $i (i32.sub (local.get $p) (i32.const 1)))
    (block $bend (loop $bloop (br_if $bend (i32.lt_s (local.get $i) (i32.const 0)))
      ${substitutionRow('b', '(i32.add (local.get $i) (i32.const 1))', '(local.get $p)', '(i32.add (i32.mul (local.get $m) (local.get $p)) (local.get $i))')}
      (local.set $i (i32.sub (local.get $i) (i32.const 1)))
      (br $bloop))))
  ;; out[i, j] = exp(-g[j] * d[i, j]) for rows i < m, columns j < k (k even; row-major, stride k):
  ;; Gaussian activations from squared distances. Four values per step where the row allows.
  (func (export "expNeg") (param $g i32) (param $d i32) (param $m i32) (param $k i32) (param $out i32)
    (local $i i32) (local $j i32) (local $pd i32) (local $po i32) (local $rowb i32) (local $kb i32) (local $xa v128) (local $nfa v128) (local $ra v128) (local $r2a v128) (local $r4a v128) (local $q0a v128) (local $q1a v128) (local $q2a v128) (local $nia v128) (local $h1a v128) (local $ea v128) (local $xb v128) (local $nfb v128) (local $rb v128) (local $r2b v128) (local $r4b v128) (local $q0b v128) (local $q1b v128) (local $q2b v128) (local $nib v128) (local $h1b v128) (local $eb v128)
    (local.set $kb (i32.shl (local.get $k) (i32.const 3)))
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $m)))
      (local.set $pd (i32.add (local.get $d) (i32.mul (local.get $i) (local.get $kb))))
      (local.set $po (i32.add (local.get $out) (i32.mul (local.get $i) (local.get $kb))))
      (local.set $j (i32.const 0))
      (block $jend (loop $jloop (br_if $jend (i32.gt_s (i32.add (local.get $j) (i32.const 32)) (local.get $kb)))
        (local.set $xa (f64x2.neg (f64x2.mul (v128.load (i32.add (local.get $g) (local.get $j))) (v128.load (i32.add (local.get $pd) (local.get $j))))))
        (local.set $xb (f64x2.neg (f64x2.mul (v128.load offset=16 (i32.add (local.get $g) (local.get $j))) (v128.load offset=16 (i32.add (local.get $pd) (local.get $j))))))
        ${expBody('a')}
        ${expBody('b')}
        (v128.store (i32.add (local.get $po) (local.get $j)) (local.get $ea))
        (v128.store offset=16 (i32.add (local.get $po) (local.get $j)) (local.get $eb))
        (local.set $j (i32.add (local.get $j) (i32.const 32)))
        (br $jloop)))
      (if (i32.lt_s (local.get $j) (local.get $kb)) (then
        (local.set $xa (f64x2.neg (f64x2.mul (v128.load (i32.add (local.get $g) (local.get $j))) (v128.load (i32.add (local.get $pd) (local.get $j))))))
        ${expBody('a')}
        (v128.store (i32.add (local.get $po) (local.get $j)) (local.get $ea))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop))))
  (func (export "gemmAddUpper") (param $a i32) (param $m i32) (param $k i32) (param $b i32) (param $n i32) (param $c i32)
    (call $kernel (local.get $a) (local.get $m) (local.get $k) (local.get $b) (local.get $n) (local.get $c)
      (i32.const 3) (i32.const 0) (i32.const 0) (i32.const 0)))
  (func (export "dist2") (param $a i32) (param $m i32) (param $k i32) (param $b i32) (param $n i32)
      (param $a2 i32) (param $b2 i32) (param $c i32)
    (call $kernelDist (local.get $a) (local.get $m) (local.get $k) (local.get $b) (local.get $n) (local.get $c)
      (i32.const 1) (local.get $a2) (local.get $b2) (i32.const 0)))
  ;; argmin2(d, m, n, lab, best, second): per row of D (m x n, n even) the smallest value, the first
  ;; column holding it, and the second smallest value (equal to the smallest on ties; Infinity for
  ;; one real column next to the +Infinity pad). Per lane the two smallest are kept with pmin/pmax
  ;; (one instruction each; the same as min/max here: distances are never NaN and never -0).
  (func $argmin2 (param $d i32) (param $m i32) (param $n i32) (param $lab i32) (param $best i32) (param $second i32) 
    (local $i i32) (local $k i32) (local $l0 f64) (local $l1 f64) (local $o i32) (local $nb i32) (local $nb2 i32) (local $v v128) (local $w v128) (local $lo v128) (local $hi v128) (local $lo1 v128) (local $hi1 v128) (local $b1 f64) (local $b2 f64) (local $s v128)
    (local.set $nb (i32.shl (local.get $n) (i32.const 3)))
    (local.set $nb2 (i32.and (local.get $nb) (i32.const -32)))
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $m)))
      (local.set $o (i32.add (local.get $d) (i32.mul (local.get $i) (local.get $nb))))
      (local.set $lo (f64x2.splat (f64.const inf)))
      (local.set $hi (f64x2.splat (f64.const inf)))
      (local.set $lo1 (f64x2.splat (f64.const inf)))
      (local.set $hi1 (f64x2.splat (f64.const inf)))
      (local.set $k (i32.const 0))
      ;; two vectors per step into two independent (smallest, second smallest) pairs, then merged
      (block $kend (loop $kloop (br_if $kend (i32.ge_s (local.get $k) (local.get $nb2)))
        (local.set $v (v128.load (i32.add (local.get $o) (local.get $k))))
        (local.set $w (v128.load offset=16 (i32.add (local.get $o) (local.get $k))))
        (local.set $hi (f64x2.pmin (local.get $hi) (f64x2.pmax (local.get $lo) (local.get $v))))
        (local.set $lo (f64x2.pmin (local.get $lo) (local.get $v)))
        (local.set $hi1 (f64x2.pmin (local.get $hi1) (f64x2.pmax (local.get $lo1) (local.get $w))))
        (local.set $lo1 (f64x2.pmin (local.get $lo1) (local.get $w)))
        (local.set $k (i32.add (local.get $k) (i32.const 32)))
        (br $kloop)))
      (if (i32.lt_s (local.get $k) (local.get $nb)) (then
        (local.set $v (v128.load (i32.add (local.get $o) (local.get $k))))
        (local.set $hi (f64x2.pmin (local.get $hi) (f64x2.pmax (local.get $lo) (local.get $v))))
        (local.set $lo (f64x2.pmin (local.get $lo) (local.get $v)))))
      (local.set $hi (f64x2.pmin (f64x2.pmin (local.get $hi) (local.get $hi1)) (f64x2.pmax (local.get $lo) (local.get $lo1))))
      (local.set $lo (f64x2.pmin (local.get $lo) (local.get $lo1)))
      ;; b1 = min of the lanes of lo; b2 = min(max of the lanes of lo, min of the lanes of hi)
      (local.set $l0 (f64x2.extract_lane 0 (local.get $lo)))
      (local.set $l1 (f64x2.extract_lane 1 (local.get $lo)))
      (local.set $b1 (select (local.get $l0) (local.get $l1) (f64.lt (local.get $l0) (local.get $l1))))
      (local.set $b2 (select (local.get $l1) (local.get $l0) (f64.lt (local.get $l0) (local.get $l1))))
      (local.set $l0 (f64x2.extract_lane 0 (local.get $hi)))
      (local.set $l1 (f64x2.extract_lane 1 (local.get $hi)))
      (local.set $l0 (select (local.get $l0) (local.get $l1) (f64.lt (local.get $l0) (local.get $l1))))
      (local.set $b2 (select (local.get $b2) (local.get $l0) (f64.lt (local.get $b2) (local.get $l0))))
      ;; first column equal to the smallest value
      (local.set $s (f64x2.splat (local.get $b1)))
      (local.set $k (i32.const 0))
      (block $fend (loop $floop
        (local.set $v (f64x2.eq (v128.load (i32.add (local.get $o) (local.get $k))) (local.get $s)))
        (br_if $fend (v128.any_true (local.get $v)))
        (local.set $k (i32.add (local.get $k) (i32.const 16)))
        (br $floop)))
      (local.set $k (i32.shr_u (local.get $k) (i32.const 3)))
      (if (i64.eqz (i64x2.extract_lane 0 (local.get $v))) (then (local.set $k (i32.add (local.get $k) (i32.const 1)))))
      (i32.store (i32.add (local.get $lab) (i32.shl (local.get $i) (i32.const 2))) (local.get $k))
      (f64.store (i32.add (local.get $best) (i32.shl (local.get $i) (i32.const 3))) (local.get $b1))
      (f64.store (i32.add (local.get $second) (i32.shl (local.get $i) (i32.const 3))) (local.get $b2))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop))))
  ;; centreGaps(c, n, k, half): half[a] = sqrt(min over b != a of |c_a - c_b|^2) / 2 (c is n x k, row-major).
  (func (export "centreGaps") (param $c i32) (param $n i32) (param $k i32) (param $half i32)
    (local $a i32) (local $b i32) (local $l i32) (local $k2 i32) (local $pa i32) (local $pb i32) (local $acc v128) (local $e v128) (local $s f64) (local $t f64) (local $ha i32) (local $hb i32)
    (local.set $k2 (i32.and (local.get $k) (i32.const -2)))
    (local.set $a (i32.const 0))
    (block $aend0 (loop $aloop0 (br_if $aend0 (i32.ge_s (local.get $a) (local.get $n)))
      (f64.store (i32.add (local.get $half) (i32.shl (local.get $a) (i32.const 3))) (f64.const inf))
      (local.set $a (i32.add (local.get $a) (i32.const 1)))
      (br $aloop0)))
    (local.set $a (i32.const 0))
    (block $aend (loop $aloop (br_if $aend (i32.ge_s (local.get $a) (local.get $n)))
      (local.set $pa (i32.add (local.get $c) (i32.shl (i32.mul (local.get $a) (local.get $k)) (i32.const 3))))
      (local.set $ha (i32.add (local.get $half) (i32.shl (local.get $a) (i32.const 3))))
      (local.set $b (i32.add (local.get $a) (i32.const 1)))
      (block $bend (loop $bloop (br_if $bend (i32.ge_s (local.get $b) (local.get $n)))
        (local.set $pb (i32.add (local.get $c) (i32.shl (i32.mul (local.get $b) (local.get $k)) (i32.const 3))))
        ${diffSquared('$pb')}
        (local.set $t (f64.mul (f64.const 0.5) (f64.sqrt (local.get $s))))
        (local.set $hb (i32.add (local.get $half) (i32.shl (local.get $b) (i32.const 3))))
        (if (f64.lt (local.get $t) (f64.load (local.get $ha))) (then (f64.store (local.get $ha) (local.get $t))))
        (if (f64.lt (local.get $t) (f64.load (local.get $hb))) (then (f64.store (local.get $hb) (local.get $t))))
        (local.set $b (i32.add (local.get $b) (i32.const 1)))
        (br $bloop)))
      (local.set $a (i32.add (local.get $a) (i32.const 1)))
      (br $aloop))))
  ;; meanVariance(x, m, k, acc): (1/k) Σ_j (1/m) Σ_i (x_ij - mean_j)^2 with two lanes holding two
  ;; columns; each column sums in row order, as the scalar column loops do (same result bit for bit).
  (func (export "meanVariance") (param $x i32) (param $m i32) (param $k i32) (param $acc i32) (result f64)
    (local $i i32) (local $l i32) (local $k2 i32) (local $p i32) (local $q i32) (local $pv i32) (local $e v128) (local $t f64) (local $total f64)
    (local.set $k2 (i32.and (local.get $k) (i32.const -2)))
    (local.set $pv (i32.add (local.get $acc) (i32.shl (local.get $k) (i32.const 3))))
    (memory.fill (local.get $acc) (i32.const 0) (i32.shl (local.get $k) (i32.const 4)))
    ;; means
    (block $iend (loop $iloop (br_if $iend (i32.ge_s (local.get $i) (local.get $m)))
      (local.set $p (i32.add (local.get $x) (i32.shl (i32.mul (local.get $i) (local.get $k)) (i32.const 3))))
      (local.set $l (i32.const 0))
      (block $lend (loop $lloop (br_if $lend (i32.ge_u (local.get $l) (local.get $k2)))
        (local.set $q (i32.add (local.get $acc) (i32.shl (local.get $l) (i32.const 3))))
        (v128.store (local.get $q) (f64x2.add (v128.load (local.get $q)) (v128.load (i32.add (local.get $p) (i32.shl (local.get $l) (i32.const 3))))))
        (local.set $l (i32.add (local.get $l) (i32.const 2)))
        (br $lloop)))
      (if (i32.and (local.get $k) (i32.const 1)) (then
        (local.set $q (i32.add (local.get $acc) (i32.shl (local.get $k2) (i32.const 3))))
        (f64.store (local.get $q) (f64.add (f64.load (local.get $q)) (f64.load (i32.add (local.get $p) (i32.shl (local.get $k2) (i32.const 3))))))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $iloop)))
    (local.set $l (i32.const 0))
    (block $dend (loop $dloop (br_if $dend (i32.ge_s (local.get $l) (local.get $k)))
      (local.set $q (i32.add (local.get $acc) (i32.shl (local.get $l) (i32.const 3))))
      (f64.store (local.get $q) (f64.div (f64.load (local.get $q)) (f64.convert_i32_s (local.get $m))))
      (local.set $l (i32.add (local.get $l) (i32.const 1)))
      (br $dloop)))
    ;; sums of squared deviations
    (local.set $i (i32.const 0))
    (block $vend (loop $vloop (br_if $vend (i32.ge_s (local.get $i) (local.get $m)))
      (local.set $p (i32.add (local.get $x) (i32.shl (i32.mul (local.get $i) (local.get $k)) (i32.const 3))))
      (local.set $l (i32.const 0))
      (block $wend (loop $wloop (br_if $wend (i32.ge_u (local.get $l) (local.get $k2)))
        (local.set $q (i32.shl (local.get $l) (i32.const 3)))
        (local.set $e (f64x2.sub (v128.load (i32.add (local.get $p) (local.get $q))) (v128.load (i32.add (local.get $acc) (local.get $q)))))
        (local.set $q (i32.add (local.get $pv) (local.get $q)))
        (v128.store (local.get $q) (f64x2.add (v128.load (local.get $q)) (f64x2.mul (local.get $e) (local.get $e))))
        (local.set $l (i32.add (local.get $l) (i32.const 2)))
        (br $wloop)))
      (if (i32.and (local.get $k) (i32.const 1)) (then
        (local.set $q (i32.shl (local.get $k2) (i32.const 3)))
        (local.set $t (f64.sub (f64.load (i32.add (local.get $p) (local.get $q))) (f64.load (i32.add (local.get $acc) (local.get $q)))))
        (local.set $q (i32.add (local.get $pv) (local.get $q)))
        (f64.store (local.get $q) (f64.add (f64.load (local.get $q)) (f64.mul (local.get $t) (local.get $t))))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $vloop)))
    (local.set $l (i32.const 0))
    (block $tend (loop $tloop (br_if $tend (i32.ge_s (local.get $l) (local.get $k)))
      (local.set $total (f64.add (local.get $total) (f64.div (f64.load (i32.add (local.get $pv) (i32.shl (local.get $l) (i32.const 3)))) (f64.convert_i32_s (local.get $m)))))
      (local.set $l (i32.add (local.get $l) (i32.const 1)))
      (br $tloop)))
    (f64.div (local.get $total) (f64.convert_i32_s (local.get $k))))
  ;; padRows(p, n, w, we): rows i = n-1 .. 0 moved from p + i w to p + i we (memmove; later rows
  ;; first, so no row is overwritten before it moved), then the we - w pad values set to 0.
  (func (export "padRows") (param $p i32) (param $n i32) (param $w i32) (param $we i32)
    (local $i i32) (local $dst i32) (local $j i32)
    (local.set $i (local.get $n))
    (block $end (loop $loop (br_if $end (i32.le_s (local.get $i) (i32.const 0)))
      (local.set $i (i32.sub (local.get $i) (i32.const 1)))
      (local.set $dst (i32.add (local.get $p) (i32.shl (i32.mul (local.get $i) (local.get $we)) (i32.const 3))))
      (memory.copy (local.get $dst) (i32.add (local.get $p) (i32.shl (i32.mul (local.get $i) (local.get $w)) (i32.const 3))) (i32.shl (local.get $w) (i32.const 3)))
      (local.set $j (local.get $w))
      (block $pend (loop $ploop (br_if $pend (i32.ge_s (local.get $j) (local.get $we)))
        (f64.store (i32.add (local.get $dst) (i32.shl (local.get $j) (i32.const 3))) (f64.const 0))
        (local.set $j (i32.add (local.get $j) (i32.const 1)))
        (br $ploop)))
      (br $loop))))
  ${lloydPass()}
)
`;

/** The kernels as WebAssembly text and compiled bytes. */
export async function buildKernels(): Promise<{ wat: string; bytes: Uint8Array }> {
  const wabt = await wabtInit();
  const mod = wabt.parseWat('kernels.wat', wat, { simd: true });
  mod.validate();
  const { buffer } = mod.toBinary({});
  mod.destroy();
  return { wat, bytes: buffer };
}

if (process.argv[1] && path.resolve(process.argv[1]) === fileURLToPath(import.meta.url)) {
  const { bytes } = await buildKernels();
  writeFileSync(path.join(dir, 'kernels.wat'), wat);
  const b64 = Buffer.from(bytes).toString('base64');
  const lines = b64.match(/.{1,100}/g) ?? [];
  writeFileSync(
    path.join(dir, 'kernels.wasm.ts'),
    `// Generated by src/model/wasm/build.ts (${bytes.length} bytes of WebAssembly); do not edit.\n` +
      `export const KERNELS_WASM_BASE64 =\n${lines.map((l) => `  '${l}'`).join(' +\n')};\n`,
  );
  writeFileSync(path.join(dir, 'kernels.wasm'), bytes);
  console.log(`kernels.wasm: ${bytes.length} bytes`);
}
