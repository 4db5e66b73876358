/** Public surface of the numeric core. */
export type * from './types.ts';
export { ModelError, type ModelErrorCode, type ModelErrorDetail } from './errors.ts';
export { mulberry32, type Random } from './random.ts';
export { kmeans } from './kmeans.ts';
export { predictRbf, checkModel } from './rbf.ts';
export { fitRbf, DEFAULT_FIT_OPTIONS, warmStartUsable } from './fit.ts';
export { serializeModel, parseModel } from './serialize.ts';
export { ridgeSolve, qrLeastSquares } from './linalg.ts';
