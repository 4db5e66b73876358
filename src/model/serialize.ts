/** Models as data: JSON text that parses back to a model with bit-identical predictions. */
import type { RbfModel } from './types.ts';
import { ModelError } from './errors.ts';
import { checkModel } from './rbf.ts';

/**
 * JSON of a model. JavaScript prints every finite double with the shortest digits that parse
 * back to the same double, so numbers survive the round trip exactly.
 */
export function serializeModel(m: RbfModel): string {
  checkModel(m);
  return JSON.stringify(m);
}

/** Parses and validates a model (sizes, finite numbers, positive widths); throws ModelError. */
export function parseModel(json: string): RbfModel {
  let v: unknown;
  try {
    v = JSON.parse(json);
  } catch (e) {
    throw new ModelError('BAD_MODEL', `not valid JSON: ${(e as Error).message}`, { where: 'model' }, 'pass the text written by serializeModel');
  }
  if (v === null || typeof v !== 'object' || Array.isArray(v)) {
    throw new ModelError('BAD_MODEL', 'JSON is not an object', { where: 'model' }, 'pass the text written by serializeModel');
  }
  const m = v as RbfModel;
  checkModel(m);
  const out: RbfModel = {
    version: 1,
    nFeatures: m.nFeatures,
    nCentres: m.nCentres,
    nOutputs: m.nOutputs,
    widthMode: m.widthMode,
    linearTerms: m.linearTerms,
    centres: m.centres,
    gammas: m.gammas,
    weights: m.weights,
    seed: m.seed,
  };
  if (m.gaussianRidge !== undefined) out.gaussianRidge = m.gaussianRidge;
  if (m.widthRest !== undefined) out.widthRest = m.widthRest;
  if (m.widthRestLength !== undefined) out.widthRestLength = m.widthRestLength;
  if (m.meta !== undefined) {
    if (m.meta === null || typeof m.meta !== 'object' || Array.isArray(m.meta)) {
      throw new ModelError('BAD_MODEL', 'meta must be an object', { where: 'model.meta' }, 'store metadata as a JSON object');
    }
    out.meta = m.meta;
  }
  return out;
}
