/**
 * Seeded random source: mulberry32 (a 32-bit state generator, public domain by Tommy Ettinger).
 * The same integer stream as the Python reference in ../shared/reference (rbf_spec.md).
 */

/** A function returning uniform numbers in [0, 1). */
export type Random = () => number;

/** mulberry32: returns a generator of uniform [0, 1) numbers for a 32-bit seed. */
export function mulberry32(seed: number): Random {
  let s = seed >>> 0;
  return () => {
    s = (s + 0x6d2b79f5) >>> 0;
    let t = s;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Integer in [0, n) from a uniform source. */
export function randomIndex(rnd: Random, n: number): number {
  const i = Math.floor(rnd() * n);
  return i < n ? i : n - 1;
}
