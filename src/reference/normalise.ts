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
