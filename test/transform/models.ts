/** Seeded model documents for the transform, drift and serve suites. */
import { SeededRng, initDense, type ActivationName, type BatchNormLayer, type DenseLayer, type Layer, type ModelDoc, type Normalisation } from '../../src/model/index.js';

export function docOf(inputs: number, layers: Layer[], normalise: Normalisation | null = null, names?: { features?: string[]; labels?: string[] }): ModelDoc {
  return {
    inputs,
    features: names?.features ?? null,
    labels: names?.labels ?? null,
    normalise,
    layers,
    meta: { name: 'seeded', description: '', created: '2025-01-01T00:00:00Z', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

/** Seeded weights and non-zero biases. */
export function dense(rng: SeededRng, inputs: number, units: number, activation: ActivationName): DenseLayer {
  const layer = initDense(inputs, units, activation, rng, 0.1);
  for (let j = 0; j < units; j++) layer.bias[j] = 0.1 * rng.normal();
  return layer;
}

export function batchNorm(rng: SeededRng, width: number): BatchNormLayer {
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

export function zscore(rng: SeededRng, n: number): Normalisation {
  const mean = Float64Array.from({ length: n }, () => 200 * rng.next() - 100);
  const std = Float64Array.from({ length: n }, () => 0.5 + 20 * rng.next());
  return { method: 'zscore', mean, std, m2: std.map((s) => s * s * 500), count: 500 };
}

export function minmax(rng: SeededRng, n: number): Normalisation {
  const min = Float64Array.from({ length: n }, () => -50 + 10 * rng.normal());
  const max = min.map((lo) => lo + 1 + 30 * rng.next());
  return { method: 'minmax', min, max, count: 500 };
}

export const BAKERY_FEATURES = ['zone1_temp_c', 'zone2_temp_c', 'zone3_temp_c', 'humidity_pct', 'belt_speed_m_min', 'dough_mass_g', 'proof_time_min'];
export const BAKERY_LABELS = ['under', 'good', 'over'];

/** The shape of examples/bakery-spec.json: 7 z-scored features, 32 relu, dropout 0.1, 3 softmax. */
export function bakeryDoc(seed: number): ModelDoc {
  const rng = new SeededRng(seed);
  const norm: Normalisation = {
    method: 'zscore',
    mean: Float64Array.of(215, 230, 220, 45, 1.6, 800, 55),
    std: Float64Array.of(9, 9, 9, 8, 0.12, 45, 7),
    m2: Float64Array.of(81, 81, 81, 64, 0.0144, 2025, 49).map((v) => v * 1000),
    count: 1000,
  };
  return docOf(7, [dense(rng, 7, 32, 'relu'), { kind: 'dropout', rate: 0.1 }, dense(rng, 32, 3, 'softmax')], norm, { features: BAKERY_FEATURES, labels: BAKERY_LABELS });
}
