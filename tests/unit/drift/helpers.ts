/** Drive assessDrift over a synthetic stream, one call per cycle (test helper, not a test file). */
import { assessDrift, type DriftResult, type DriftSettings } from '../../../src/drift/index.ts';
import type { Stream } from './synthetic.ts';

export const HOUR = 3_600_000;

export interface Replay {
  /** Reported state after the cycle that consumed target step i (steps of one cycle share it). */
  stateAt: string[];
  results: DriftResult[];
}

/** Replay a stream in cycles of `stepsPerCycle` matured target steps; readings are always fresh. */
export function replay(stream: Stream, settings: DriftSettings, stepsPerCycle = 24, roundTripJson = true): Replay {
  let prior: unknown = null;
  const stateAt: string[] = [];
  const results: DriftResult[] = [];
  for (let i = 0; i < stream.matured.length; i += stepsPerCycle) {
    const rows = stream.matured.slice(i, i + stepsPerCycle);
    const now = stream.t0 + (i + rows.length - 1) * HOUR + 60_000;
    const r = assessDrift({
      series: 'oskaveld-north',
      prior,
      matured: rows.flat(),
      novelty: [],
      lastReadingAt: now - 60_000,
      now,
      stepMs: HOUR,
      baselineMase: stream.baselineMase,
      baselineMaseByLead: stream.baselineByLead,
      settings,
    });
    prior = roundTripJson ? JSON.parse(JSON.stringify(r.memory)) : r.memory;
    results.push(r);
    for (let j = 0; j < rows.length; j++) stateAt.push(r.state);
  }
  return { stateAt, results };
}
