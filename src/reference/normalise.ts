/** The model's input normalisation in float64. */
import { inputAffine, mat64, type Mat64, type Normalisation } from '../model/index.js';

/**
 * Raw features to what the first layer sees:
 * - zscore: (x - mean) / std
 * - minmax: (x - min) / (max - min)
 * A feature with zero spread (std 0, or max = min) carries no information and maps to 0 rather
 * than to ±Infinity or NaN. A block whose statistics are not fitted yet (null) passes x through.
 * @example normalise64({ method: 'minmax', min, max, count }, x)
 */
export function normalise64(n: Normalisation | null, x: Mat64): Mat64 {
  const affine = inputAffine(n);
  if (!affine) return mat64(x.rows, x.cols, Float64Array.from(x.data));
  const { centre, spread } = affine;
  const y = new Float64Array(x.data.length);
  for (let r = 0; r < x.rows; r++) {
    for (let c = 0; c < x.cols; c++) {
      const i = r * x.cols + c;
      y[i] = spread[c] === 0 ? 0 : (x.data[i] - centre[c]) / spread[c];
    }
  }
  return mat64(x.rows, x.cols, y);
}

/**
 * Backward through `normalise64`: a gradient with respect to the normalised features becomes
 * one with respect to the raw features, d/dx = d/dx' / spread. A feature with zero spread maps
 * to a constant 0, so its raw gradient is 0; an unfitted block passes the gradient through.
 * @example normaliseBackward64(doc.normalise, dxNormalised)
 */
export function normaliseBackward64(n: Normalisation | null, dxn: Mat64): Mat64 {
  const affine = inputAffine(n);
  if (!affine) return mat64(dxn.rows, dxn.cols, Float64Array.from(dxn.data));
  const { spread } = affine;
  const dx = new Float64Array(dxn.data.length);
  for (let r = 0; r < dxn.rows; r++) {
    for (let c = 0; c < dxn.cols; c++) {
      const i = r * dxn.cols + c;
      dx[i] = spread[c] === 0 ? 0 : dxn.data[i] / spread[c];
    }
  }
  return mat64(dxn.rows, dxn.cols, dx);
}
