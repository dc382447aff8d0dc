import { tfjs } from '../tfjs-lazy.js';
import type { ActivationKind } from './kind.js';

/** Row-wise softmax: y_j = exp(z_j) / sum_k exp(z_k). */
export const softmax: ActivationKind = {
  name: 'softmax',
  code: 7,
  usesAlpha: false,
  init: 'glorot',
  refForward(z, rows, cols) {
    const y = new Float64Array(z.length);
    for (let r = 0; r < rows; r++) {
      const o = r * cols;
      // Subtracting the row maximum leaves the result unchanged and keeps every exp() <= 1.
      let max = -Infinity;
      for (let c = 0; c < cols; c++) max = Math.max(max, z[o + c]);
      let sum = 0;
      for (let c = 0; c < cols; c++) {
        const e = Math.exp(z[o + c] - max);
        y[o + c] = e;
        sum += e;
      }
      for (let c = 0; c < cols; c++) y[o + c] /= sum;
    }
    return y;
  },
  refBackward(_z, y, dy, rows, cols) {
    // The Jacobian diag(y) - y yᵀ applied to dy: dz_j = y_j (dy_j - sum_k dy_k y_k).
    const dz = new Float64Array(y.length);
    for (let r = 0; r < rows; r++) {
      const o = r * cols;
      let dot = 0;
      for (let c = 0; c < cols; c++) dot += dy[o + c] * y[o + c];
      for (let c = 0; c < cols; c++) dz[o + c] = y[o + c] * (dy[o + c] - dot);
    }
    return dz;
  },
  engineForward: (z) => tfjs().softmax(z, -1),
  engineBackward: (_z, y, dy) => tfjs().mul(y, tfjs().sub(dy, tfjs().sum(tfjs().mul(dy, y), 1, true))),
  f32: {
    fusedInKernel: null,
    forward(data, at, rows, stride, cols) {
      for (let r = 0; r < rows; r++) {
        const o = at + r * stride;
        // Subtract the row maximum first so exp never overflows (common practice).
        let max = -Infinity;
        for (let c = 0; c < cols; c++) max = Math.max(max, data[o + c]);
        let sum = 0;
        for (let c = 0; c < cols; c++) {
          const e = Math.exp(data[o + c] - max);
          data[o + c] = e;
          sum += e;
        }
        for (let c = 0; c < cols; c++) data[o + c] /= sum;
      }
    },
    backward(_z, y, dy, rows, cols) {
      // Jacobian-vector product: dz = y ⊙ (dy - Σ dy·y) per row.
      const dz = new Float32Array(dy.length);
      for (let r = 0; r < rows; r++) {
        const o = r * cols;
        let dot = 0;
        for (let c = 0; c < cols; c++) dot += dy[o + c] * y[o + c];
        for (let c = 0; c < cols; c++) dz[o + c] = y[o + c] * (dy[o + c] - dot);
      }
      return dz;
    },
  },
};
