/**
 * Seeded batching for gradient descent. Each epoch draws a fresh Fisher–Yates permutation
 * (Durstenfeld's in-place form) from the run's seeded generator, so a run is reproducible
 * bit for bit from its seed, and cuts it into ceil(n / k) batches: k = 1 is stochastic
 * descent (n updates per epoch), k = n is full-batch descent (one update).
 */
import type { Rng } from '../model/layers/kind.js';
import { fisherYates } from '../model/rng.js';

/**
 * Number of parameter updates in one pass over `rows` rows with batches of `batchSize`.
 *
 * @example batchesPerEpoch(10, 3) // 4
 */
export function batchesPerEpoch(rows: number, batchSize: number): number {
  return Math.ceil(rows / batchSize);
}

/**
 * A uniformly random permutation of 0..n-1 drawn from `rng`.
 *
 * @example shuffledOrder(5, rng) // e.g. Int32Array [3, 0, 4, 1, 2]
 */
export function shuffledOrder(n: number, rng: Rng): Int32Array {
  // The same permutation as the model's Fisher–Yates, viewed as signed indices (n < 2^31).
  return new Int32Array(fisherYates(n, rng).buffer);
}

/**
 * Row indices of each batch of one epoch: a fresh permutation cut into ceil(n / k) slices.
 * The last batch is smaller when k does not divide n.
 *
 * @example epochBatches(5, 2, rng).map((b) => b.length) // [2, 2, 1]
 */
export function epochBatches(rows: number, batchSize: number, rng: Rng): Int32Array[] {
  const order = shuffledOrder(rows, rng);
  const batches: Int32Array[] = [];
  for (let start = 0; start < rows; start += batchSize) {
    batches.push(order.subarray(start, Math.min(rows, start + batchSize)));
  }
  return batches;
}

/**
 * Gather the rows `indices` of a row-major matrix with `cols` columns into a new float64 matrix.
 *
 * @example gatherRows(new Float32Array([1, 2, 3, 4]), 2, Int32Array.of(1)) // Float64Array [3, 4]
 */
export function gatherRows(data: Float32Array | Float64Array, cols: number, indices: ArrayLike<number>): Float64Array {
  const out = new Float64Array(indices.length * cols);
  for (let r = 0; r < indices.length; r++) {
    const src = indices[r] * cols;
    out.set(data.subarray(src, src + cols), r * cols);
  }
  return out;
}

/**
 * Split 0..n-1 into a training part and a hold-out part of round(n * fraction) rows,
 * chosen by a seeded permutation. Both parts are returned in ascending order.
 *
 * @example splitHoldout(10, 0.2, rng) // { train: 8 indices, holdout: 2 indices }
 */
export function splitHoldout(rows: number, fraction: number, rng: Rng): { train: Int32Array; holdout: Int32Array } {
  const order = shuffledOrder(rows, rng);
  const held = Math.min(rows - 1, Math.max(1, Math.round(rows * fraction)));
  const holdout = order.slice(0, held).sort();
  const train = order.slice(held).sort();
  return { train, holdout };
}
