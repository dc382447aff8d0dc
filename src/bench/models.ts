/** Seeded dense networks of given widths, for benchmarks and throughput tests. */
import { SeededRng, initDense, type ActivationName, type ModelDoc } from '../model/index.js';

/**
 * A dense stack with seeded weights and small seeded biases: `widths[0]` inputs, then one dense
 * layer per further width. Hidden layers use `hidden`, the last layer `last`.
 * @example denseStackDoc([784, 512, 256, 10], 7).layers.length // 3
 */
export function denseStackDoc(widths: readonly number[], seed: number, hidden: ActivationName = 'relu', last: ActivationName = 'linear'): ModelDoc {
  if (widths.length < 2 || widths.some((w) => !Number.isInteger(w) || w < 1)) {
    throw new RangeError(`denseStackDoc: widths must be at least two positive integers, got [${widths.join(', ')}]`);
  }
  const rng = new SeededRng(seed);
  const layers = widths.slice(1).map((units, i) => {
    const layer = initDense(widths[i], units, i === widths.length - 2 ? last : hidden, rng);
    // Non-zero biases so a dropped or misplaced bias shows in every comparison.
    for (let j = 0; j < units; j++) layer.bias[j] = 0.1 * rng.normal();
    return layer;
  });
  return {
    inputs: widths[0],
    features: null,
    labels: null,
    normalise: null,
    layers,
    meta: { name: `dense ${widths.join('-')}`, description: 'seeded benchmark network', created: '2026-01-01T00:00:00Z', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

/** rows x width seeded normal features, row-major. */
export function seededRows(rows: number, width: number, seed: number): Float32Array {
  const rng = new SeededRng(seed);
  const x = new Float32Array(rows * width);
  for (let i = 0; i < x.length; i++) x[i] = rng.normal();
  return x;
}

/** Multiply-adds of one row through the dense layers of `widths` (a FLOP is counted as 2 per multiply-add). */
export function multiplyAddsPerRow(widths: readonly number[]): number {
  let n = 0;
  for (let i = 1; i < widths.length; i++) n += widths[i - 1] * widths[i];
  return n;
}
