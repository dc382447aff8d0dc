/** Helpers for the fast engine's float32 passes of element-wise activations. */
import type { ActivationF32 } from './kind.js';

/**
 * The float32 pass of an element-wise activation from its value and its slope:
 * y = value(z), dL/dz = dL/dy · slope(z, y).
 * @example pointwiseF32((z) => Math.tanh(z), (_z, y) => 1 - y * y)
 */
export function pointwiseF32(
  value: (z: number, alpha: number) => number,
  slope: (z: number, y: number, alpha: number) => number,
  fusedInKernel: 'relu' | null = null,
): ActivationF32 {
  return {
    fusedInKernel,
    forward(data, at, rows, stride, cols, alpha) {
      for (let r = 0; r < rows; r++) {
        const o = at + r * stride;
        for (let c = 0; c < cols; c++) data[o + c] = value(data[o + c], alpha);
      }
    },
    backward(z, y, dy, _rows, _cols, alpha) {
      const dz = new Float32Array(dy.length);
      for (let i = 0; i < dy.length; i++) dz[i] = dy[i] * slope(z[i], y[i], alpha);
      return dz;
    },
  };
}
