/** Seeded model documents for the format tests. Values are invented, drawn from a seeded RNG. */
import type { ActivationName, Layer, ModelDoc, Normalisation, StorageCodec } from '../../src/model/types.js';

/** mulberry32: a small seeded generator of uniform numbers in [0, 1). */
export function seededRandom(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** n values uniform in [-spread, spread), rounded to float32. */
export function randomFloat32(random: () => number, n: number, spread = 1): Float32Array {
  const out = new Float32Array(n);
  for (let i = 0; i < n; i++) out[i] = (random() * 2 - 1) * spread;
  return out;
}

function randomFloat64(random: () => number, n: number, lo: number, hi: number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = lo + random() * (hi - lo);
  return out;
}

function dense(random: () => number, inWidth: number, units: number, activation: ActivationName, alpha = 0): Layer {
  return {
    kind: 'dense',
    size: units,
    activation,
    alpha,
    weight: randomFloat32(random, inWidth * units),
    bias: randomFloat32(random, units, 0.1),
  };
}

export type NormalisationChoice = 'zscore' | 'minmax' | 'unfitted-zscore' | 'unfitted-minmax' | 'none';

function normalisation(random: () => number, inputs: number, choice: NormalisationChoice): Normalisation | null {
  switch (choice) {
    case 'zscore':
      return {
        method: 'zscore',
        mean: randomFloat64(random, inputs, -5, 5),
        std: randomFloat64(random, inputs, 0.5, 3),
        m2: randomFloat64(random, inputs, 10, 100),
        count: 42,
      };
    case 'minmax':
      return { method: 'minmax', min: randomFloat64(random, inputs, -10, 0), max: randomFloat64(random, inputs, 1, 10), count: 17 };
    case 'unfitted-zscore':
      return { method: 'zscore', mean: null, std: null, m2: null, count: 0 };
    case 'unfitted-minmax':
      return { method: 'minmax', min: null, max: null, count: 0 };
    case 'none':
      return null;
  }
}

/**
 * A model with every layer kind and every activation:
 * 3 -> dense 4 relu -> batchnorm -> dropout -> dense 5 leaky_relu -> dense 3 sigmoid
 *   -> dense 4 tanh -> dense 2 softplus -> dense 3 linear -> dense 2 softmax.
 */
export function everyKindDoc(options: { seed?: number; storage?: StorageCodec; normalise?: NormalisationChoice } = {}): ModelDoc {
  const random = seededRandom(options.seed ?? 7);
  const layers: Layer[] = [
    dense(random, 3, 4, 'relu'),
    {
      kind: 'batchnorm',
      gamma: randomFloat32(random, 4),
      beta: randomFloat32(random, 4),
      runningMean: randomFloat32(random, 4),
      runningVariance: Float32Array.from(randomFloat32(random, 4), (v) => Math.abs(v) + 0.5),
      epsilon: 1e-5,
      momentum: 0.9,
    },
    { kind: 'dropout', rate: 0.25 },
    dense(random, 4, 5, 'leaky_relu', 0.1),
    dense(random, 5, 3, 'sigmoid'),
    dense(random, 3, 4, 'tanh'),
    dense(random, 4, 2, 'softplus'),
    dense(random, 2, 3, 'linear'),
    dense(random, 3, 2, 'softmax'),
  ];
  return {
    inputs: 3,
    features: ['height', 'weight', 'age'],
    labels: ['no', 'yes'],
    normalise: normalisation(random, 3, options.normalise ?? 'zscore'),
    layers,
    meta: {
      name: 'every-kind',
      description: 'seeded test model with every layer kind',
      created: '2025-01-02T03:04:05.000Z',
      extra: { team: 'scoring', 'ünïcode': 'ok ✓' },
    },
    provenance: [
      { checksum: '0badf00d', source: 'models/base.tdn', action: 'tune', at: '2025-01-03T00:00:00.000Z' },
      { checksum: 'cafebabe', source: 'models/tuned.tdn', action: 'shrink f16', at: '2025-01-04T00:00:00.000Z' },
    ],
    storage: options.storage ?? 'f32',
  };
}

/** The smallest useful model: 2 inputs -> dense 1 sigmoid, no names, no normalisation. */
export function tinyDoc(seed = 1): ModelDoc {
  const random = seededRandom(seed);
  return {
    inputs: 2,
    features: null,
    labels: null,
    normalise: null,
    layers: [dense(random, 2, 1, 'sigmoid')],
    meta: { name: 'tiny', description: '', created: '', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

/** Run `fn` and return what it threw (fails the test if it did not throw). */
export function thrown(fn: () => unknown): unknown {
  try {
    fn();
  } catch (error) {
    return error;
  }
  throw new Error('expected a throw, got a return');
}
