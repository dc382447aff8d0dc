import { tfjs } from '../tfjs-lazy.js';
import { pointwiseF32 } from './f32.js';
import type { ActivationKind } from './kind.js';

/** Hyperbolic tangent. */
export const tanh: ActivationKind = {
  name: 'tanh',
  code: 5,
  usesAlpha: false,
  init: 'glorot',
  refForward(z) {
    const y = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) y[i] = Math.tanh(z[i]);
    return y;
  },
  refBackward(_z, y, dy) {
    // tanh' = 1 - tanh², computed from the saved output.
    const dz = new Float64Array(y.length);
    for (let i = 0; i < y.length; i++) dz[i] = dy[i] * (1 - y[i] * y[i]);
    return dz;
  },
  engineForward: (z) => tfjs().tanh(z),
  engineBackward: (_z, y, dy) => tfjs().mul(dy, tfjs().sub(1, tfjs().square(y))),
  f32: pointwiseF32(
    (z) => Math.tanh(z),
    (_z, y) => 1 - y * y,
  ),
};
