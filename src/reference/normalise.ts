/** The model's input normalisation in float64. */
import type { Mat64, Normalisation } from '../model/index.js';
import { mat64 } from '../model/index.js';

/**
 * Raw features to what the first layer sees:
 * - zscore: (x - mean) / std
 * - minmax: (x - min) / (max - min)
 * A feature with zero spread (std 0, or max = min) carries no information and maps to 0 rather
 * than to ±Infinity or NaN. A block whose statistics are not fitted yet (null) passes x through.
 * @example normalise64({ method: 'minmax', min, max, count }, x)
 */
export function normalise64(n: Normalisation | null, x: Mat64): Mat64 {
  const centre = n ? (n.method === 'zscore' ? n.mean : n.min) : null;
  const spread = n ? (n.method === 'zscore' ? n.std : rangeOf(n.min, n.max)) : null;
  if (!centre || !spread) return mat64(x.rows, x.cols, Float64Array.from(x.data));
  const y = new Float64Array(x.data.length);
  for (let r = 0; r < x.rows; r++) {
    for (let c = 0; c < x.cols; c++) {
      const i = r * x.cols + c;
      y[i] = spread[c] === 0 ? 0 : (x.data[i] - centre[c]) / spread[c];
    }
  }
  return mat64(x.rows, x.cols, y);
}

function rangeOf(min: Float64Array | null, max: Float64Array | null): Float64Array | null {
  if (!min || !max) return null;
  return max.map((hi, c) => hi - min[c]);
}

/**
 * Backward through `normalise64`: a gradient with respect to the normalised features becomes
 * one with respect to the raw features, d/dx = d/dx' / spread. A feature with zero spread maps
 * to a constant 0, so its raw gradient is 0; an unfitted block passes the gradient through.
 * @example normaliseBackward64(doc.normalise, dxNormalised)
 */
export function normaliseBackward64(n: Normalisation | null, dxn: Mat64): Mat64 {
  const spread = n ? (n.method === 'zscore' ? (n.mean ? n.std : null) : rangeOf(n.min, n.max)) : null;
  if (!spread) return mat64(dxn.rows, dxn.cols, Float64Array.from(dxn.data));
  const dx = new Float64Array(dxn.data.length);
  for (let r = 0; r < dxn.rows; r++) {
    for (let c = 0; c < dxn.cols; c++) {
      const i = r * dxn.cols + c;
      dx[i] = spread[c] === 0 ? 0 : dxn.data[i] / spread[c];
    }
  }
  return mat64(dxn.rows, dxn.cols, dx);
}
