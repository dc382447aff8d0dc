/**
 * Input normalisation statistics kept inside the model, fitted from training rows in one
 * streamed pass.
 *
 * z-score: Welford's online mean and M2 (Welford 1962; Knuth, TAOCP vol. 2, 4.2.2), which avoids
 * the cancellation of sum(x^2) - n mean^2. Continuing an existing block over new rows merges a
 * batch's (count, mean, M2) into the stored one with the parallel combination of Chan, Golub
 * and LeVeque (1979): delta = mean_b - mean_a, mean = mean_a + delta n_b / n,
 * M2 = M2_a + M2_b + delta^2 n_a n_b / n. std is the population standard deviation sqrt(M2 / n).
 *
 * min-max: running per-feature minimum and maximum.
 */
import { FeatureMoments } from '../model/moments.js';
import type { Normalisation } from '../model/types.js';

/** On fine-tuning: keep the stored statistics frozen, or continue them over the new rows. */
export type NormalisationPolicy = 'keep' | 'continue';

/**
 * Merge two (count, mean, M2) summaries (Chan et al. 1979). Returns new arrays.
 *
 * @example combineMoments({ count: 2, mean: [1], m2: [2] }, { count: 2, mean: [3], m2: [2] }) // count 4, mean [2], m2 [8]
 */
export function combineMoments(
  a: { count: number; mean: ArrayLike<number>; m2: ArrayLike<number> },
  b: { count: number; mean: ArrayLike<number>; m2: ArrayLike<number> },
): { count: number; mean: Float64Array; m2: Float64Array } {
  const f = a.mean.length;
  const count = a.count + b.count;
  const mean = new Float64Array(f);
  const m2 = new Float64Array(f);
  for (let c = 0; c < f; c++) {
    if (count === 0) continue;
    const delta = b.mean[c] - a.mean[c];
    mean[c] = a.mean[c] + (delta * b.count) / count;
    m2[c] = a.m2[c] + b.m2[c] + (delta * delta * a.count * b.count) / count;
  }
  return { count, mean, m2 };
}

/** True when the block still waits for its statistics. */
export function isUnfitted(norm: Normalisation): boolean {
  return norm.method === 'zscore' ? norm.mean === null || norm.m2 === null || norm.std === null : norm.min === null || norm.max === null;
}

/**
 * Statistics for `norm` after seeing `rows` rows of `x`: fitted from scratch when the block is
 * unfitted, merged into the stored ones under 'continue', returned unchanged (a copy) under 'keep'.
 * Never mutates `norm`.
 *
 * @example updateNormalisation({ method: 'zscore', mean: null, std: null, m2: null, count: 0 }, x, rows, 4, 'continue')
 */
export function updateNormalisation(
  norm: Normalisation,
  x: Float32Array | Float64Array,
  rows: number,
  features: number,
  policy: NormalisationPolicy,
): Normalisation {
  const unfitted = isUnfitted(norm);
  if (!unfitted && policy === 'keep') return copyNormalisation(norm);
  if (norm.method === 'zscore') {
    const acc = new FeatureMoments(features);
    acc.add(x, rows);
    const merged =
      unfitted || norm.count === 0
        ? { count: acc.count, mean: acc.mean, m2: acc.m2 }
        : combineMoments({ count: norm.count, mean: norm.mean!, m2: norm.m2! }, acc);
    const std = new Float64Array(features);
    for (let c = 0; c < features; c++) std[c] = merged.count > 0 ? Math.sqrt(merged.m2[c] / merged.count) : 0;
    return { method: 'zscore', mean: merged.mean, std, m2: merged.m2, count: merged.count };
  }
  const min = new Float64Array(features).fill(Infinity);
  const max = new Float64Array(features).fill(-Infinity);
  if (!unfitted) {
    min.set(norm.min!);
    max.set(norm.max!);
  }
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < features; c++) {
      const v = x[r * features + c];
      if (v < min[c]) min[c] = v;
      if (v > max[c]) max[c] = v;
    }
  }
  return { method: 'minmax', min, max, count: (unfitted ? 0 : norm.count) + rows };
}

/** A deep copy, so a new model document shares no arrays with its parent. */
export function copyNormalisation(norm: Normalisation): Normalisation {
  if (norm.method === 'zscore') {
    return {
      method: 'zscore',
      mean: norm.mean && norm.mean.slice(),
      std: norm.std && norm.std.slice(),
      m2: norm.m2 && norm.m2.slice(),
      count: norm.count,
    };
  }
  return { method: 'minmax', min: norm.min && norm.min.slice(), max: norm.max && norm.max.slice(), count: norm.count };
}
