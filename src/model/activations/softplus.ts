import { tfjs } from '../tfjs-lazy.js';
import { pointwiseF32 } from './f32.js';
import type { ActivationKind } from './kind.js';
import { logistic } from './sigmoid.js';

/** f(z) = log(1 + exp(z)), a smooth ReLU whose derivative is the logistic function. */
export const softplus: ActivationKind = {
  name: 'softplus',
  code: 6,
  usesAlpha: false,
  // Close to ReLU for |z| > a few units, so it takes ReLU's initialisation.
  init: 'he',
  refForward(z) {
    // max(z, 0) + log1p(exp(-|z|)): exp never overflows, and log1p keeps the small tail exact.
    const y = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) y[i] = Math.max(z[i], 0) + Math.log1p(Math.exp(-Math.abs(z[i])));
    return y;
  },
  refBackward(z, _y, dy) {
    const dz = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) dz[i] = dy[i] * logistic(z[i]);
    return dz;
  },
  engineForward: (z) => tfjs().softplus(z),
  engineBackward: (z, _y, dy) => tfjs().mul(dy, tfjs().sigmoid(z)),
  f32: pointwiseF32(
    (z) => Math.max(z, 0) + Math.log1p(Math.exp(-Math.abs(z))),
    (z) => logistic(z),
  ),
};
