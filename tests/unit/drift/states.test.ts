/**
 * State machine of assessDrift: hysteresis (a spike does not reach alert), dwell before recovery,
 * stale input, novelty raising watch, notices (transitions and alert reminders), memory
 * round trips, re-run safety and bad input.
 */
import { describe, expect, it } from 'vitest';
import { assessDrift, DRIFT_DEFAULTS, type DriftResult, type DriftSettings, type MaturedError } from '../../../src/drift/index.ts';
import { DRIFT_STATE_CODE } from '../../../src/store/types.ts';
import { makeStream } from './synthetic.ts';
import { HOUR, replay } from './helpers.ts';

const DAY = 24;
const T0 = Date.UTC(2026, 2, 2);

/** All H leads of one target step with the same ratio to a baseline of 0.8. */
function step(i: number, ratio: number, H = 24): MaturedError[] {
  return Array.from({ length: H }, (_, h) => ({ t: T0 + i * HOUR, lead: h + 1, scaledError: 0.8 * ratio }));
}

interface Drive {
  results: DriftResult[];
  states: string[];
}

/** Hourly cycles over a ratio sequence (deterministic streams: the behaviour is exact). */
function drive(ratios: number[], settings: DriftSettings = DRIFT_DEFAULTS, opts: { readingAt?: (now: number) => number | null; novelty?: (i: number) => number | null } = {}): Drive {
  let prior: unknown = null;
  const results: DriftResult[] = [];
  const states: string[] = [];
  ratios.forEach((r, i) => {
    const now = T0 + i * HOUR + 60_000;
    const nov = opts.novelty?.(i) ?? null;
    const res = assessDrift({
      series: 'brennick-yard',
      prior,
      matured: step(i, r),
      novelty: nov === null ? [] : [{ t: now, activation: nov }],
      lastReadingAt: opts.readingAt ? opts.readingAt(now) : now - 60_000,
      now,
      stepMs: HOUR,
      baselineMase: 0.8,
      settings,
    });
    prior = JSON.parse(JSON.stringify(res.memory));
    results.push(res);
    states.push(res.state);
  });
  return { results, states };
}

/** Alternating in-control ratios around 1 (mean exactly 1, small wobble). */
const calm = (n: number) => Array.from({ length: n }, (_, i) => (i % 2 === 0 ? 0.9 : 1.1));

describe('hysteresis', () => {
  it('an isolated spike (one target step, all leads 50x the baseline error) does not leave ok', () => {
    const d = drive([...calm(10 * DAY), 50, ...calm(5 * DAY)]);
    expect(new Set(d.states)).toEqual(new Set(['ok']));
    // The spike is clipped: it moves the statistic by at most (clip - 1) / spread / b.
    const jump = d.results[10 * DAY].figures.statistic - d.results[10 * DAY - 1].figures.statistic;
    expect(jump).toBeLessThanOrEqual((DRIFT_DEFAULTS.clipRatio - 1) / d.results[10 * DAY - 1].figures.spread / DRIFT_DEFAULTS.batchSteps + 1e-12);
  });

  it('isolated spikes in real persistent noise never reach alert (12 seeds)', () => {
    for (let seed = 1; seed <= 12; seed++) {
      const s = makeStream({ seed, steps: 30 * DAY, phi: 0.8, spikeAt: 20 * DAY + (seed % 24), spikeSize: 100 });
      expect(replay(s, DRIFT_DEFAULTS, 4).stateAt).not.toContain('alert');
    }
  });

  it('a bad stretch of a few hours rises no further than watch, and the state needs raiseAfterSteps to rise', () => {
    const d = drive([...calm(10 * DAY), ...new Array(12).fill(5), ...calm(5 * DAY)]);
    expect(d.states).not.toContain('alert');
    const s = { ...DRIFT_DEFAULTS, raiseAfterSteps: 1 };
    const first = drive([...calm(DAY), ...new Array(3 * DAY).fill(5)], s).states.indexOf('watch');
    const later = drive([...calm(DAY), ...new Array(3 * DAY).fill(5)]).states.indexOf('watch');
    expect(first).toBeGreaterThan(0);
    expect(later - first).toBe(DRIFT_DEFAULTS.raiseAfterSteps - 1);
  });
});

describe('recovery and dwell', () => {
  const drift = (days: number) => [...calm(10 * DAY), ...new Array(days * DAY).fill(3), ...calm(10 * DAY)];

  it('returns to ok only after the errors are back and the dwell has passed', () => {
    const d = drive(drift(4));
    const alertAt = d.states.indexOf('alert');
    const endOfDrift = 14 * DAY;
    expect(alertAt).toBeGreaterThan(10 * DAY);
    expect(alertAt).toBeLessThan(endOfDrift);
    const okAgain = d.states.indexOf('ok', alertAt);
    expect(okAgain).toBeGreaterThan(endOfDrift);
    // No state between alert and recovery other than alert (no flapping).
    expect(new Set(d.states.slice(alertAt, okAgain))).toEqual(new Set(['alert']));
    // Recovery needs recoveryThreshold / allowance in-control batches at least.
    expect(okAgain - endOfDrift).toBeGreaterThanOrEqual((DRIFT_DEFAULTS.recoveryThreshold / DRIFT_DEFAULTS.allowance - 1) * DRIFT_DEFAULTS.batchSteps);
    expect(okAgain - endOfDrift).toBeLessThanOrEqual(4 * DRIFT_DEFAULTS.batchSteps);
    expect(d.results[okAgain].transition).toMatchObject({ from: 'alert', to: 'ok', reason: 'recovered' });
    expect(d.results[okAgain].figures.statistic).toBe(0);
  });

  it('a longer dwell holds the state even when the errors are back at once', () => {
    const dwellSteps = 10 * DAY;
    const s = { ...DRIFT_DEFAULTS, dwellSteps };
    const d = drive([...calm(10 * DAY), ...new Array(2 * DAY).fill(8), ...calm(15 * DAY)], s);
    const raisedAt = d.states.findIndex((x) => x !== 'ok');
    const okAgain = d.states.indexOf('ok', raisedAt);
    expect(raisedAt).toBeGreaterThan(0);
    expect(okAgain - raisedAt).toBeGreaterThanOrEqual(dwellSteps);
    const short = drive([...calm(10 * DAY), ...new Array(2 * DAY).fill(8), ...calm(15 * DAY)]);
    const shortOk = short.states.indexOf('ok', short.states.findIndex((x) => x !== 'ok'));
    expect(shortOk).toBeLessThan(okAgain);
  });
});

describe('stale input', () => {
  it('no reading for longer than staleAfterMs is stale, with its own transitions', () => {
    const lastGood = T0 + 30 * HOUR;
    const d = drive(calm(3 * DAY), DRIFT_DEFAULTS, { readingAt: (now) => (now > T0 + 30 * HOUR && now < T0 + 50 * HOUR ? lastGood : now) });
    const staleAt = d.states.indexOf('stale');
    expect(T0 + staleAt * HOUR + 60_000 - lastGood).toBeGreaterThan(DRIFT_DEFAULTS.staleAfterMs);
    expect(T0 + (staleAt - 1) * HOUR + 60_000 - lastGood).toBeLessThanOrEqual(DRIFT_DEFAULTS.staleAfterMs);
    expect(d.results[staleAt].transition).toMatchObject({ from: 'ok', to: 'stale', reason: 'stale' });
    expect(d.results[staleAt].health).toMatchObject({ state: 'stale', lastReadingAt: lastGood });
    expect(d.results[staleAt].stateCode).toBe(DRIFT_STATE_CODE.stale);
    const back = d.states.indexOf('ok', staleAt);
    expect(back).toBe(50);
    expect(d.results[back].transition).toMatchObject({ from: 'stale', to: 'ok', reason: 'readings-resumed' });
  });

  it('no reading at all is stale from the first assessment', () => {
    const r = assessDrift({ series: 'tarrow-hill', prior: null, matured: [], novelty: [], lastReadingAt: null, now: T0, stepMs: HOUR, baselineMase: 1, settings: DRIFT_DEFAULTS });
    expect(r.state).toBe('stale');
  });
});

describe('input novelty', () => {
  it('a high share of novel inputs raises watch (never alert) and clears with hysteresis', () => {
    const n = 4 * DAY;
    const novel = (i: number) => (i >= DAY && i < 2 * DAY ? 0.001 : 0.6);
    const d = drive(calm(n), DRIFT_DEFAULTS, { novelty: novel });
    const watchAt = d.states.indexOf('watch');
    // window 24 inputs, share 0.3: the 8th novel input of 24 (7/24 < 0.3 <= 8/24)
    expect(watchAt).toBe(DAY + 7);
    expect(d.results[watchAt].transition).toMatchObject({ from: 'ok', to: 'watch', reason: 'novelty' });
    expect(d.states).not.toContain('alert');
    const okAt = d.states.indexOf('ok', watchAt);
    // cleared when the share falls below share / 2 = 0.15: fewer than 4 novel inputs of 24 in the window
    expect(d.results[okAt].figures.noveltyShare).toBeLessThan(DRIFT_DEFAULTS.novelty.share / 2);
    expect(d.results[okAt - 1].figures.noveltyShare).toBeGreaterThanOrEqual(DRIFT_DEFAULTS.novelty.share / 2);
    expect(d.results[okAt].transition).toMatchObject({ from: 'watch', to: 'ok', reason: 'recovered' });
  });

  it('a re-sent novelty value (same issue time) is counted once', () => {
    const base = { series: 'x', matured: [], lastReadingAt: T0, now: T0, stepMs: HOUR, baselineMase: 1, settings: DRIFT_DEFAULTS };
    const a = assessDrift({ ...base, prior: null, novelty: [{ t: T0, activation: 0.01 }] });
    const b = assessDrift({ ...base, prior: a.memory, novelty: [{ t: T0, activation: 0.01 }] });
    expect(b.figures.noveltyInputs).toBe(1);
  });
});

describe('notices', () => {
  it('one notice per transition, and a reminder every repeatAlertMs while in alert', () => {
    const d = drive([...calm(5 * DAY), ...new Array(5 * DAY).fill(6), ...calm(5 * DAY)]);
    const notices = d.results.map((r) => r.notice).filter((n) => n !== null);
    const transitions = d.results.map((r) => r.transition).filter((t) => t !== null);
    expect(transitions.map((t) => `${t!.from}>${t!.to}`)).toEqual(['ok>watch', 'watch>alert', 'alert>ok']);
    const reminders = notices.filter((n) => n!.kind === 'reminder');
    expect(notices.filter((n) => n!.kind === 'transition')).toHaveLength(3);
    const alertStart = transitions[1]!.at;
    const alertEnd = transitions[2]!.at;
    expect(reminders).toHaveLength(Math.floor((alertEnd - HOUR - alertStart) / DRIFT_DEFAULTS.repeatAlertMs));
    reminders.forEach((r, i) => expect(r!.at - alertStart).toBe((i + 1) * DRIFT_DEFAULTS.repeatAlertMs));
    const none = drive([...calm(5 * DAY), ...new Array(5 * DAY).fill(6)], { ...DRIFT_DEFAULTS, repeatAlertMs: 0 });
    expect(none.results.filter((r) => r.notice?.kind === 'reminder')).toHaveLength(0);
  });

  it('figures carry the statistic, recent and baseline MASE', () => {
    const d = drive([...calm(5 * DAY), ...new Array(5 * DAY).fill(6)]);
    const t = d.results.find((r) => r.transition?.to === 'alert')!.transition!;
    expect(t.figures.statistic).toBeGreaterThanOrEqual(DRIFT_DEFAULTS.alertThreshold);
    expect(t.figures.baselineMase).toBe(0.8);
    // recent MASE: the last batchSteps matured target steps (some calm ones still inside at the transition)
    const inWindow = d.results.indexOf(d.results.find((r) => r.transition?.to === 'alert')!) - 5 * DAY + 1;
    const calmIn = DRIFT_DEFAULTS.batchSteps - inWindow;
    expect(t.figures.recentMase).toBeCloseTo((0.8 * 6 * inWindow + 0.8 * calmIn) / DRIFT_DEFAULTS.batchSteps, 9);
    expect(d.results.at(-1)!.figures.recentMase).toBeCloseTo(0.8 * 6, 9);
    expect(t.series).toBe('brennick-yard');
  });
});

describe('memory and input handling', () => {
  it('feeding hour by hour or a day at a time gives the same detector state; JSON round trips change nothing', () => {
    const s = makeStream({ seed: 5, steps: 20 * DAY, phi: 0.8, changeAt: 12 * DAY, levelShift: 2 });
    const hourly = replay(s, DRIFT_DEFAULTS, 1, true).results.at(-1)!;
    const daily = replay(s, DRIFT_DEFAULTS, 24, false).results.at(-1)!;
    expect(daily.memory.detector).toEqual(hourly.memory.detector);
    expect(daily.memory.recent).toEqual(hourly.memory.recent);
  });

  it('matured errors already consumed are skipped (a re-run cycle does not count twice)', () => {
    const base = { series: 'x', novelty: [], lastReadingAt: T0 + 2 * HOUR, now: T0 + 2 * HOUR, stepMs: HOUR, baselineMase: 0.8, settings: DRIFT_DEFAULTS };
    const a = assessDrift({ ...base, prior: null, matured: [...step(0, 3), ...step(1, 3)] });
    const b = assessDrift({ ...base, prior: a.memory, matured: [...step(0, 3), ...step(1, 3)] });
    expect(b.consumed).toBe(0);
    expect(b.skippedOld).toBe(48);
    expect(b.memory.detector).toEqual(a.memory.detector);
  });

  it('bad values, a missing baseline and unreadable memory give problems with codes, not exceptions', () => {
    const base = { series: 'oskaveld-north', novelty: [{ t: T0, activation: 7 }], lastReadingAt: T0, now: T0, stepMs: HOUR, settings: DRIFT_DEFAULTS };
    const bad: MaturedError[] = [{ t: T0, lead: 1, scaledError: Number.NaN }, { t: T0, lead: 0, scaledError: 1 }, { t: T0, lead: 2, scaledError: -1 }, ...step(0, 1)];
    const r = assessDrift({ ...base, prior: { version: 99 }, matured: bad, baselineMase: null });
    expect(r.problems.map((p) => p.code).sort()).toEqual(['DRIFT_BAD_INPUT', 'DRIFT_BAD_INPUT', 'DRIFT_MEMORY_RESET', 'DRIFT_NO_BASELINE']);
    for (const p of r.problems) {
      expect(p.series).toBe('oskaveld-north');
      expect(p.hint.length).toBeGreaterThan(10);
    }
    expect(r.consumed).toBe(0);
    expect(r.figures.recentMase).toBeCloseTo(0.8, 12);
    expect(Number.isNaN(r.health.baselineMase)).toBe(true);
    expect(r.state).toBe('ok');
    const settingsBad = assessDrift({ ...base, prior: null, matured: step(0, 1), baselineMase: 0.8, settings: { ...DRIFT_DEFAULTS, watchThreshold: 20 } });
    expect(settingsBad.problems.map((p) => p.code)).toContain('DRIFT_BAD_SETTINGS');
    expect(settingsBad.consumed).toBe(0);
  });

  it('per-lead baselines are used where given', () => {
    const byLead = Array.from({ length: 24 }, (_, h) => 0.2 + 0.05 * h);
    const matured = byLead.map((b, h) => ({ t: T0, lead: h + 1, scaledError: 2 * b }));
    const one = assessDrift({ series: 'x', prior: null, matured, novelty: [], lastReadingAt: T0, now: T0, stepMs: HOUR, baselineMase: 10, baselineMaseByLead: byLead, settings: { ...DRIFT_DEFAULTS, batchSteps: 1 } });
    // ratio 2 on every lead: S = (2 - 1) / spreadPrior - k in batch units of one step
    expect(one.figures.statistic).toBeCloseTo((2 - 1) / DRIFT_DEFAULTS.spreadPrior - DRIFT_DEFAULTS.allowance, 9);
  });
});
