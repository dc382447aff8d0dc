/** Builders for core tests: hand-made and seeded random model documents, fixed-mask contexts. */
import type { ActivationName, BatchNormLayer, DenseLayer, DropoutLayer, ForwardContext, Layer, ModelDoc, Normalisation } from '../../src/model/index.js';
import { SeededRng, initDense } from '../../src/model/index.js';

export function docOf(inputs: number, layers: Layer[], normalise: Normalisation | null = null): ModelDoc {
  return {
    inputs,
    features: null,
    labels: null,
    normalise,
    layers,
    meta: { name: 'test', description: '', created: '2025-01-01T00:00:00Z', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

export function denseOf(weight: number[], bias: number[], activation: ActivationName, alpha = 0.01): DenseLayer {
  return { kind: 'dense', size: bias.length, activation, alpha, weight: Float32Array.from(weight), bias: Float32Array.from(bias) };
}

/** A dense layer with seeded random weights AND biases (init leaves biases at zero). */
export function randomDense(rng: SeededRng, inputs: number, units: number, activation: ActivationName): DenseLayer {
  const layer = initDense(inputs, units, activation, rng, 0.1);
  for (let j = 0; j < units; j++) layer.bias[j] = 0.1 * rng.normal();
  return layer;
}

export function randomBatchNorm(rng: SeededRng, width: number): BatchNormLayer {
  const f = (g: () => number) => Float32Array.from({ length: width }, g);
  return {
    kind: 'batchnorm',
    gamma: f(() => 0.5 + rng.next()),
    beta: f(() => 0.2 * rng.normal()),
    runningMean: f(() => 0.3 * rng.normal()),
    runningVariance: f(() => 0.5 + 1.5 * rng.next()),
    epsilon: 1e-3,
    momentum: 0.9,
  };
}

export function dropoutOf(rate: number): DropoutLayer {
  return { kind: 'dropout', rate };
}

export function zscoreOf(rng: SeededRng, n: number): Normalisation {
  const mean = Float64Array.from({ length: n }, () => 10 * rng.normal());
  const std = Float64Array.from({ length: n }, () => 0.5 + 3 * rng.next());
  return { method: 'zscore', mean, std, m2: std.map((s) => s * s * 100), count: 100 };
}

export function minmaxOf(rng: SeededRng, n: number): Normalisation {
  const min = Float64Array.from({ length: n }, () => -5 + rng.normal());
  const max = min.map((lo) => lo + 0.5 + 10 * rng.next());
  return { method: 'minmax', min, max, count: 100 };
}

/** A seeded inverted-dropout context: the same (layer, rows, cols) call returns the same mask. */
export function trainingContext(seed: number): ForwardContext {
  const cache = new Map<string, Float32Array>();
  return {
    training: true,
    dropoutMask(layerIndex, rows, cols, rate) {
      const key = `${layerIndex}:${rows}:${cols}:${rate}`;
      let mask = cache.get(key);
      if (!mask) {
        const rng = new SeededRng(seed * 1000 + layerIndex);
        const keep = 1 / (1 - rate);
        mask = Float32Array.from({ length: rows * cols }, () => (rng.next() < rate ? 0 : keep));
        cache.set(key, mask);
      }
      return mask;
    },
  };
}

export function randomMatrix(rng: SeededRng, rows: number, cols: number, scale = 1): Float64Array {
  return Float64Array.from({ length: rows * cols }, () => scale * rng.normal());
}
