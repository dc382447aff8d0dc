/**
 * The input normalisation as one per-feature affine map, written once for every path:
 *   u = (x - centre) / spread
 * zscore: centre = mean, spread = std; minmax: centre = min, spread = max - min (float64).
 * A feature with zero spread carries no information and maps to 0 rather than to ±Infinity.
 */
import type { Normalisation } from './types.js';

export interface InputAffine {
  readonly centre: Float64Array;
  readonly spread: Float64Array;
}

/**
 * Centre and spread per feature in float64; null when there is no block or it is not fitted yet.
 * @example inputAffine({ method: 'minmax', min, max, count }) // { centre: min, spread: max - min }
 */
export function inputAffine(n: Normalisation | null): InputAffine | null {
  if (!n) return null;
  if (n.method === 'zscore') return n.mean && n.std ? { centre: n.mean, spread: n.std } : null;
  const { min, max } = n;
  if (!min || !max) return null;
  return { centre: min, spread: max.map((hi, c) => hi - min[c]) };
}

/**
 * The map as a float32 subtract-then-multiply pair, u = (x - shift) · scale, folded in float64
 * and rounded once: shift = centre, scale = 1/spread (0 for zero spread). Subtracting first
 * keeps the float32 error relative to the centred value, not to the raw feature's magnitude.
 */
export function inputShiftScale(n: Normalisation | null, inputs: number): { shift: Float32Array; scale: Float32Array } | null {
  const affine = inputAffine(n);
  if (!affine) return null;
  const shift = new Float32Array(inputs);
  const scale = new Float32Array(inputs);
  for (let c = 0; c < inputs; c++) {
    shift[c] = affine.centre[c];
    scale[c] = affine.spread[c] === 0 ? 0 : 1 / affine.spread[c];
  }
  return { shift, scale };
}
