/** Public surface of the numeric core. */
export type * from './types.ts';
export { ModelError, type ModelErrorCode, type ModelErrorDetail } from './errors.ts';
export { mulberry32, type Random } from './random.ts';
export { kmeans } from './kmeans.ts';
export { fitRbf, predictRbf, DEFAULT_FIT_OPTIONS, checkModel, warmStartUsable } from './rbf.ts';
export { serializeModel, parseModel } from './serialize.ts';
export { ridgeSolve, qrLeastSquares } from './linalg.ts';
