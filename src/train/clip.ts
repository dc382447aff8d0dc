/**
 * Global gradient-norm clipping: when the L2 norm over all gradient tensors together exceeds
 * `maxNorm`, every gradient is scaled by maxNorm / norm, so the update keeps its direction.
 */

/**
 * L2 norm over every value of every tensor, summed in float64. Null entries (frozen) are skipped.
 *
 * @example globalNorm([Float64Array.of(3), Float64Array.of(4)]) // 5
 */
export function globalNorm(grads: readonly (Float32Array | Float64Array | null)[]): number {
  let sum = 0;
  for (const g of grads) {
    if (!g) continue;
    for (let i = 0; i < g.length; i++) sum += g[i] * g[i];
  }
  return Math.sqrt(sum);
}

/**
 * Scale `grads` in place so their global norm is at most `maxNorm`. Returns the norm before
 * clipping and the factor applied (1 when nothing changed).
 *
 * @example clipGlobalNorm([Float64Array.of(3, 4)], 1) // { norm: 5, factor: 0.2 }, grads now [0.6, 0.8]
 */
export function clipGlobalNorm(grads: readonly (Float32Array | Float64Array | null)[], maxNorm: number): { norm: number; factor: number } {
  const norm = globalNorm(grads);
  if (!(norm > maxNorm) || !Number.isFinite(norm)) return { norm, factor: 1 };
  const factor = maxNorm / norm;
  for (const g of grads) {
    if (!g) continue;
    for (let i = 0; i < g.length; i++) g[i] *= factor;
  }
  return { norm, factor };
}
