import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from '../tfjs-lazy.js';
import { pointwiseF32 } from './f32.js';
import type { ActivationKind } from './kind.js';

/** f(z) = z for z > 0, alpha·z otherwise; keeps a gradient for negative inputs. */
export const leakyRelu: ActivationKind = {
  name: 'leaky_relu',
  code: 3,
  usesAlpha: true,
  init: 'he',
  fused: 'leakyrelu',
  refForward(z, _rows, _cols, alpha) {
    const y = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) y[i] = z[i] > 0 ? z[i] : alpha * z[i];
    return y;
  },
  refBackward(z, _y, dy, _rows, _cols, alpha) {
    const dz = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) dz[i] = z[i] > 0 ? dy[i] : alpha * dy[i];
    return dz;
  },
  engineForward: (z, alpha) => tfjs().leakyRelu(z, alpha),
  engineBackward: (z, _y, dy, alpha) => tfjs().where(tfjs().greater(z, 0), dy, tfjs().mul<tf.Tensor2D>(dy, alpha)),
  f32: pointwiseF32(
    (z, alpha) => (z < 0 ? alpha * z : z),
    (z, _y, alpha) => (z < 0 ? alpha : 1),
  ),
};
