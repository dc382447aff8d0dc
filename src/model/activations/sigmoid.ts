import { tfjs } from '../tfjs-lazy.js';
import { pointwiseF32 } from './f32.js';
import type { ActivationKind } from './kind.js';

/** The logistic function f(z) = 1 / (1 + exp(-z)). */
export const sigmoid: ActivationKind = {
  name: 'sigmoid',
  code: 4,
  usesAlpha: false,
  init: 'glorot',
  fused: 'sigmoid',
  refForward(z) {
    const y = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) y[i] = logistic(z[i]);
    return y;
  },
  refBackward(_z, y, dy) {
    // f' = f (1 - f), computed from the saved output.
    const dz = new Float64Array(y.length);
    for (let i = 0; i < y.length; i++) dz[i] = dy[i] * y[i] * (1 - y[i]);
    return dz;
  },
  engineForward: (z) => tfjs().sigmoid(z),
  engineBackward: (_z, y, dy) => tfjs().mul(dy, tfjs().mul(y, tfjs().sub(1, y))),
  f32: pointwiseF32(
    (z) => logistic(z),
    (_z, y) => y * (1 - y),
  ),
};

/**
 * Logistic of one number. For negative z, exp(-z) would overflow for z < -709; the form
 * exp(z) / (1 + exp(z)) keeps every step finite and loses no precision near 0.
 */
export function logistic(z: number): number {
  if (z >= 0) return 1 / (1 + Math.exp(-z));
  const e = Math.exp(z);
  return e / (1 + e);
}
