/** Stage timings of one series cycle, milliseconds. A stage not reached stays 0. */
export interface StageTimings {
  read: number;
  prepare: number;
  fit: number;
  predict: number;
  write: number;
  score: number;
  drift: number;
}

export const STAGES = ['read', 'prepare', 'fit', 'predict', 'write', 'score', 'drift'] as const satisfies readonly (keyof StageTimings)[];

export function emptyTimings(): StageTimings {
  return { read: 0, prepare: 0, fit: 0, predict: 0, write: 0, score: 0, drift: 0 };
}

/** Element-wise sum (for run summaries and the throughput benchmark). */
export function addTimings(into: StageTimings, t: StageTimings): StageTimings {
  for (const s of STAGES) into[s] += t[s];
  return into;
}
