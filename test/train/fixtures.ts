/** Small model documents for the train tests. */
import type { ActivationName, DenseLayer, Layer, ModelDoc, Normalisation } from '../../src/model/types.js';

export function denseSpec(units: number, activation: ActivationName): DenseLayer {
  // Empty tensors: the tune loop initialises them from its seed.
  return { kind: 'dense', size: units, activation, alpha: 0.01, weight: new Float32Array(0), bias: new Float32Array(0) };
}

export function modelDoc(inputs: number, layers: Layer[], normalise: Normalisation | null = null): ModelDoc {
  return {
    inputs,
    features: null,
    labels: null,
    normalise,
    layers,
    meta: { name: 'test model', description: '', created: '2026-01-01T00:00:00Z', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

export const emptyZscore = (): Normalisation => ({ method: 'zscore', mean: null, std: null, m2: null, count: 0 });

/** Mazur 2015: the 2-2-2 logistic network. W[i][j] is input i -> unit j, row-major. */
export function mazurDoc(): ModelDoc {
  return modelDoc(2, [
    // [w1 (i1->h1), w3 (i1->h2), w2 (i2->h1), w4 (i2->h2)]
    { kind: 'dense', size: 2, activation: 'sigmoid', alpha: 0, weight: Float32Array.of(0.15, 0.25, 0.2, 0.3), bias: Float32Array.of(0.35, 0.35) },
    // [w5 (h1->o1), w7 (h1->o2), w6 (h2->o1), w8 (h2->o2)]
    { kind: 'dense', size: 2, activation: 'sigmoid', alpha: 0, weight: Float32Array.of(0.4, 0.5, 0.45, 0.55), bias: Float32Array.of(0.6, 0.6) },
  ]);
}
