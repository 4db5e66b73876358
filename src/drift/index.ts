/** Drift layer: change detection on scaled forecast errors, input novelty, stalled input. Pure. */
export * from './settings.ts';
export * from './scaled.ts';
export * from './detector.ts';
export * from './novelty.ts';
export * from './assess.ts';
