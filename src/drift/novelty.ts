/**
 * Input novelty: the share of recent forecast inputs whose largest Gaussian activation
 * max_k exp(-gamma_k |x - mu_k|^2) is below a threshold, i.e. inputs that lie far from every
 * centre of the fitted network. A high share says the process is outside what the model has
 * seen (new equipment, a sensor fault) before any forecast has matured.
 */
import { NOVELTY_MIN_INPUTS, type NoveltySettings } from './settings.ts';

/** The novelty of one forecast input: its issue time and its largest activation in [0, 1]. */
export interface NoveltyInput {
  t: number;
  activation: number;
}

export interface NoveltyWindow {
  /** [issue time, activation], oldest first, within the window. */
  entries: [number, number][];
  /** Raised-watch flag (hysteresis: set at share >= s.share, cleared below s.share / 2). */
  high: boolean;
}

export interface NoveltyUpdate {
  window: NoveltyWindow;
  share: number;
  inputs: number;
  invalid: number;
}

/**
 * Add new inputs (only those newer than the newest kept, so a re-run cycle is not counted twice),
 * drop those older than the window, and recompute the share and the flag.
 */
export function updateNovelty(prev: NoveltyWindow, add: readonly NoveltyInput[], nowMs: number, windowMs: number, s: NoveltySettings, maxEntries: number): NoveltyUpdate {
  let invalid = 0;
  const entries = prev.entries.slice();
  let newest = entries.length > 0 ? entries[entries.length - 1][0] : -Infinity;
  const fresh = add
    .filter((n) => {
      const ok = n && Number.isFinite(n.t) && Number.isFinite(n.activation) && n.activation >= 0 && n.activation <= 1;
      if (!ok) invalid++;
      return ok;
    })
    .sort((a, b) => a.t - b.t);
  for (const n of fresh) {
    if (n.t <= newest) continue;
    entries.push([n.t, n.activation]);
    newest = n.t;
  }
  const from = nowMs - windowMs;
  let start = 0;
  while (start < entries.length && entries[start][0] <= from) start++;
  if (entries.length - start > maxEntries) start = entries.length - maxEntries;
  const kept = entries.slice(start);
  let novel = 0;
  for (const [, a] of kept) if (a < s.activation) novel++;
  const share = kept.length > 0 ? novel / kept.length : 0;
  let high = prev.high;
  if (kept.length < NOVELTY_MIN_INPUTS) high = false;
  else if (share >= s.share) high = true;
  else if (share < s.share / 2) high = false;
  return { window: { entries: kept, high }, share, inputs: kept.length, invalid };
}
