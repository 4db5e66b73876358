/**
 * One drift assessment per series cycle: feed the newly matured errors to the detector, update the
 * novelty window, check for stalled input, and report the state with its figures. Pure: no clock,
 * no I/O; the memory it returns is plain JSON for the state store.
 *
 * Reported state = stale                       when no reading for more than staleAfterMs
 *                = max(error level, novelty)   otherwise (novelty can raise watch, never alert)
 */
import { DRIFT_STATE_CODE, type DriftState, type HealthPoint } from '../store/types.ts';
import { detectorStep, initialDetector, LEVEL_RANK, spreadOf, type DetectorState, type ErrorLevel } from './detector.ts';
import { updateNovelty, type NoveltyInput, type NoveltyWindow } from './novelty.ts';
import { groupByTarget, type MaturedError } from './scaled.ts';
import { checkDriftSettings, SPREAD_PRIOR_BATCHES, type DriftSettings } from './settings.ts';

export const DRIFT_MEMORY_VERSION = 1;

/** What the state store keeps between cycles (JSON). */
export interface DriftMemory {
  version: typeof DRIFT_MEMORY_VERSION;
  /** Reported state and since when (epoch ms of the assessment that entered it). */
  state: DriftState;
  stateSince: number;
  detector: DetectorState;
  /** Newest target time fed to the detector; older matured errors are ignored (re-run safety). */
  lastTargetAt: number | null;
  /** [target time, sum of scaled errors, count] of the last batchSteps matured target steps. */
  recent: [number, number, number][];
  novelty: NoveltyWindow;
  /** Last time a notice (transition or alert reminder) was issued. */
  lastNoticeAt: number | null;
  lastAssessedAt: number;
}

export interface DriftAssessInput {
  series: string;
  /** The memory returned by the previous assessment (as read back from the store), or null. */
  prior: unknown;
  /** Forecasts that matured since the last cycle, any order (older than the memory's newest are skipped). */
  matured: readonly MaturedError[];
  /** Novelty of the inputs of forecasts issued since the last cycle. */
  novelty: readonly NoveltyInput[];
  /** Time of the newest reading (epoch ms), null when none is known. */
  lastReadingAt: number | null;
  now: number;
  stepMs: number;
  /** Backtest MASE over all leads: the reference error level. null/NaN = unknown (detector paused). */
  baselineMase: number | null;
  /** Backtest MASE per lead (index lead - 1); where missing or not positive the overall one is used. */
  baselineMaseByLead?: ArrayLike<number> | null;
  settings: DriftSettings;
}

export type TransitionReason = 'error-drift' | 'novelty' | 'stale' | 'readings-resumed' | 'recovered';

export interface DriftFigures {
  /** CUSUM statistic, spread units. */
  statistic: number;
  watchThreshold: number;
  alertThreshold: number;
  /** MASE of the last batchSteps matured target steps (NaN when none). */
  recentMase: number;
  /** Reference MASE from the backtest (NaN when unknown). */
  baselineMase: number;
  /** Current spread estimate (sd of a batch mean of the error ratio). */
  spread: number;
  noveltyShare: number;
  noveltyInputs: number;
  lastReadingAt: number | null;
}

export interface DriftTransition {
  series: string;
  from: DriftState;
  to: DriftState;
  /** Epoch ms of the assessment that saw the change. */
  at: number;
  reason: TransitionReason;
  figures: DriftFigures;
}

/** What the notifier sends: every transition, and a reminder at repeatAlertMs while in alert. */
export interface DriftNotice extends DriftTransition {
  kind: 'transition' | 'reminder';
}

export type DriftProblemCode = 'DRIFT_NO_BASELINE' | 'DRIFT_BAD_INPUT' | 'DRIFT_MEMORY_RESET' | 'DRIFT_BAD_SETTINGS';

export interface DriftProblem {
  code: DriftProblemCode;
  series: string;
  message: string;
  hint: string;
  count?: number;
}

export interface DriftResult {
  memory: DriftMemory;
  state: DriftState;
  stateCode: number;
  health: HealthPoint;
  figures: DriftFigures;
  transition: DriftTransition | null;
  notice: DriftNotice | null;
  /** Matured target steps fed to the detector in this assessment. */
  consumed: number;
  /** Matured errors skipped because their target was already consumed. */
  skippedOld: number;
  problems: DriftProblem[];
}

const STATES: readonly DriftState[] = ['ok', 'watch', 'alert', 'stale'];
const LEVELS: readonly ErrorLevel[] = ['ok', 'watch', 'alert'];

export function freshMemory(settings: DriftSettings, now: number): DriftMemory {
  return {
    version: DRIFT_MEMORY_VERSION,
    state: 'ok',
    stateSince: now,
    detector: initialDetector(settings, SPREAD_PRIOR_BATCHES),
    lastTargetAt: null,
    recent: [],
    novelty: { entries: [], high: false },
    lastNoticeAt: null,
    lastAssessedAt: now,
  };
}

const isNum = (v: unknown): v is number => typeof v === 'number' && Number.isFinite(v);
const isNumOrNull = (v: unknown): v is number | null => v === null || isNum(v);

/** Validate a memory read back from the store; null when it is not a usable v1 memory. */
export function parseDriftMemory(raw: unknown): DriftMemory | null {
  let v = raw;
  if (typeof v === 'string') {
    try {
      v = JSON.parse(v);
    } catch {
      return null;
    }
  }
  if (!v || typeof v !== 'object') return null;
  const m = v as Record<string, unknown>;
  if (m.version !== DRIFT_MEMORY_VERSION) return null;
  if (!STATES.includes(m.state as DriftState) || !isNum(m.stateSince) || !isNumOrNull(m.lastTargetAt) || !isNumOrNull(m.lastNoticeAt) || !isNum(m.lastAssessedAt)) return null;
  const d = m.detector as Record<string, unknown> | null;
  if (!d || typeof d !== 'object') return null;
  for (const k of ['statistic', 'recovery', 'stepsInLevel', 'raiseRun', 'spreadVar', 'spreadWeight', 'batchSum', 'batchCount', 'observed']) if (!isNum(d[k])) return null;
  if (!LEVELS.includes(d.level as ErrorLevel) || !LEVELS.includes(d.raiseRunLevel as ErrorLevel)) return null;
  if ((d.statistic as number) < 0 || (d.spreadVar as number) <= 0) return null;
  if (!Array.isArray(m.recent) || !m.recent.every((e) => Array.isArray(e) && e.length === 3 && e.every(isNum))) return null;
  const n = m.novelty as Record<string, unknown> | null;
  if (!n || typeof n !== 'object' || typeof n.high !== 'boolean' || !Array.isArray(n.entries)) return null;
  if (!n.entries.every((e) => Array.isArray(e) && e.length === 2 && e.every(isNum))) return null;
  return structuredClone(m) as unknown as DriftMemory;
}

function rank(s: DriftState): number {
  return s === 'stale' ? 3 : LEVEL_RANK[s];
}

/** Assess one series. Never throws on bad data: problems are returned beside a valid result. */
export function assessDrift(input: DriftAssessInput): DriftResult {
  const { series, settings: s, now } = input;
  const problems: DriftProblem[] = [];

  const settingsIssues = checkDriftSettings(s);
  const parsed = input.prior === null || input.prior === undefined ? null : parseDriftMemory(input.prior);
  if (input.prior !== null && input.prior !== undefined && parsed === null) {
    problems.push({
      code: 'DRIFT_MEMORY_RESET',
      series,
      message: 'stored drift state is not a readable version-1 memory; the detector starts afresh',
      hint: 'nothing to do unless this repeats every cycle (then the state store is being written by something else)',
    });
  }
  const memory: DriftMemory = parsed ?? freshMemory(s, now);
  const priorState = memory.state;

  const baseline = input.baselineMase !== null && Number.isFinite(input.baselineMase) && input.baselineMase > 0 ? input.baselineMase : null;
  const byLead = input.baselineMaseByLead ?? null;
  const baselineFor = (lead: number): number => {
    const v = byLead && lead - 1 < byLead.length ? byLead[lead - 1] : Number.NaN;
    return Number.isFinite(v) && v > 0 ? v : (baseline ?? Number.NaN);
  };

  const grouped = groupByTarget(input.matured, memory.lastTargetAt, baselineFor);
  let consumed = 0;
  let badRatio = 0;
  if (settingsIssues.length > 0) {
    problems.push({
      code: 'DRIFT_BAD_SETTINGS',
      series,
      message: `drift settings rejected (${settingsIssues.map((p) => `${p.key}: ${p.message}`).join('; ')}); the detector is paused`,
      hint: 'fix the drift section of the config; `radcast check` lists the resolved values',
    });
  } else {
    for (const o of grouped.observations) {
      memory.recent.push([o.t, o.errorSum, o.count]);
      memory.lastTargetAt = o.t;
      if (!Number.isFinite(o.ratio)) {
        badRatio++;
        continue;
      }
      detectorStep(memory.detector, o.ratio, s);
      consumed++;
    }
    if (memory.recent.length > s.batchSteps) memory.recent = memory.recent.slice(memory.recent.length - s.batchSteps);
  }
  if (badRatio > 0) {
    problems.push({
      code: 'DRIFT_NO_BASELINE',
      series,
      message: `no usable baseline MASE for ${badRatio} matured target step(s); they count in the recent MASE but not in the detector`,
      hint: 'the detector compares against the backtest error level: let the backtest run (radcast backtest) so a baseline MASE is stored',
      count: badRatio,
    });
  }
  if (grouped.invalid > 0) {
    problems.push({
      code: 'DRIFT_BAD_INPUT',
      series,
      message: `${grouped.invalid} matured error(s) were not finite, negative, or had a bad lead; skipped`,
      hint: 'look for non-finite forecasts or actuals, or a missing MASE scale (constant training window)',
      count: grouped.invalid,
    });
  }

  const windowMs = s.novelty.windowSteps * input.stepMs;
  const nov = updateNovelty(memory.novelty, input.novelty, now, Number.isFinite(windowMs) ? windowMs : 0, s.novelty, Math.max(1, 4 * s.novelty.windowSteps));
  memory.novelty = nov.window;
  if (nov.invalid > 0) {
    problems.push({ code: 'DRIFT_BAD_INPUT', series, message: `${nov.invalid} novelty value(s) outside [0, 1]; skipped`, hint: 'novelty is the largest Gaussian activation of a forecast input', count: nov.invalid });
  }

  const stale = input.lastReadingAt === null || !Number.isFinite(input.lastReadingAt) || now - input.lastReadingAt > s.staleAfterMs;
  const errorLevel = memory.detector.level;
  const base: ErrorLevel = LEVEL_RANK[errorLevel] >= 1 || !memory.novelty.high ? errorLevel : 'watch';
  const state: DriftState = stale ? 'stale' : base;

  let recentSum = 0;
  let recentN = 0;
  for (const [, sum, n] of memory.recent) {
    recentSum += sum;
    recentN += n;
  }
  const figures: DriftFigures = {
    statistic: memory.detector.statistic,
    watchThreshold: s.watchThreshold,
    alertThreshold: s.alertThreshold,
    recentMase: recentN > 0 ? recentSum / recentN : Number.NaN,
    baselineMase: baseline ?? Number.NaN,
    spread: spreadOf(memory.detector),
    noveltyShare: nov.share,
    noveltyInputs: nov.inputs,
    lastReadingAt: input.lastReadingAt,
  };

  let transition: DriftTransition | null = null;
  if (state !== priorState) {
    let reason: TransitionReason;
    if (state === 'stale') reason = 'stale';
    else if (priorState === 'stale') reason = 'readings-resumed';
    else if (rank(state) < rank(priorState)) reason = 'recovered';
    else reason = LEVEL_RANK[errorLevel] >= rank(state) ? 'error-drift' : 'novelty';
    transition = { series, from: priorState, to: state, at: now, reason, figures };
    memory.state = state;
    memory.stateSince = now;
  }

  let notice: DriftNotice | null = null;
  if (transition) {
    notice = { kind: 'transition', ...transition };
    memory.lastNoticeAt = now;
  } else if (state === 'alert' && s.repeatAlertMs > 0 && (memory.lastNoticeAt === null || now - memory.lastNoticeAt >= s.repeatAlertMs)) {
    notice = { kind: 'reminder', series, from: state, to: state, at: now, reason: 'error-drift', figures };
    memory.lastNoticeAt = now;
  }
  memory.lastAssessedAt = now;

  const health: HealthPoint = {
    series,
    t: now,
    state,
    statistic: figures.statistic,
    recentMase: figures.recentMase,
    baselineMase: figures.baselineMase,
    noveltyShare: figures.noveltyShare,
    lastReadingAt: input.lastReadingAt,
  };
  return { memory, state, stateCode: DRIFT_STATE_CODE[state], health, figures, transition, notice, consumed, skippedOld: grouped.stale, problems };
}
